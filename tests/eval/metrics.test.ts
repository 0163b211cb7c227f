import fc from 'fast-check';
import { describe, expect, test } from 'vitest';
import {
  aggregateBottomUp,
  type BottomSeries,
  groupBottom,
  HIERARCHY_LEVELS,
} from '../../src/eval/hierarchy-levels.js';
import {
  levelWeights,
  mase,
  maseScale,
  rmsse,
  rmsseScale,
  weightedLevelScore,
  wrmsse,
} from '../../src/eval/metrics.js';

// REFERENCES.md §5.2 worked example (hand-computed there, re-checked with Python).
const train = [0, 0, 3, 1, 4, 2, 5, 3];
const test_ = [4, 2];
const fcst = [3, 3];

describe('RMSSE and MASE on the worked example of REFERENCES.md §5.2', () => {
  test('leading zeros trimmed: scale 6, RMSSE 0.4082482905', () => {
    const s = rmsseScale(train);
    expect(s).toMatchObject({ status: 'ok', first: 2, n: 6 });
    expect(s.scale).toBeCloseTo(6, 12);
    expect(rmsse(test_, fcst, s.scale)).toBeCloseTo(0.4082482905, 10);
  });

  test('without trimming: RMSSE 0.4236592729 (tells the two behaviours apart)', () => {
    const s = rmsseScale(train, { trimLeadingZeros: false });
    expect(s.scale).toBeCloseTo(39 / 7, 12);
    expect(rmsse(test_, fcst, s.scale)).toBeCloseTo(0.4236592729, 10);
  });

  test('seasonal lag 2 on the untrimmed series: RMSSE 0.6546536707', () => {
    const s = rmsseScale(train, { trimLeadingZeros: false, lag: 2 });
    expect(rmsse(test_, fcst, s.scale)).toBeCloseTo(0.6546536707, 10);
  });

  test('MASE: 0.4166667 on the trimmed series, 0.4666667 on the whole one', () => {
    expect(mase(test_, fcst, maseScale(train, { trimLeadingZeros: true }).scale)).toBeCloseTo(0.4166667, 7);
    // Hyndman & Koehler's definition uses the whole in-sample series: the default.
    expect(mase(test_, fcst, maseScale(train).scale)).toBeCloseTo(0.4666667, 7);
  });
});

describe('WRMSSE on the two-item example of REFERENCES.md §5.3', () => {
  const trainB = [2, 2, 2, 3, 2, 2, 3, 2];
  const trainT = train.map((v, i) => v + trainB[i]!);
  test('per-series RMSSE, weights from a 2-day window, WRMSSE 0.5074948544', () => {
    const rA = rmsse([4, 2], [3, 3], rmsseScale(train).scale);
    const rB = rmsse([2, 3], [2, 2], rmsseScale(trainB).scale);
    const rT = rmsse([6, 5], [5, 5], rmsseScale(trainT).scale);
    expect(rB).toBeCloseTo(0.9354143467, 10);
    expect(rT).toBeCloseTo(0.2852987011, 10);
    // Dollars over the last 2 training days: A (5 + 3) x 2.00, B (3 + 2) x 5.00.
    const w = levelWeights([16, 25])!;
    expect(w[0]).toBeCloseTo(0.3902439, 7);
    const item = weightedLevelScore([rA, rB], w);
    expect(item.score).toBeCloseTo(0.7296910077, 10);
    const total = weightedLevelScore([rT], levelWeights([41]));
    expect(wrmsse([item.score, total.score])).toBeCloseTo(0.5074948544, 10);
  });
});

describe('edge cases are reported, never divided by zero', () => {
  test('a series with no sale gets no scale', () => {
    expect(rmsseScale([0, 0, 0, -1])).toMatchObject({ status: 'no_sale', first: -1 });
    expect(Number.isNaN(rmsse([1], [1], Number.NaN))).toBe(true);
  });
  test('a first sale on the last day leaves no difference', () => {
    expect(rmsseScale([0, 0, 4])).toMatchObject({ status: 'one_day', n: 1 });
  });
  test('a flat series has scale 0 and no RMSSE', () => {
    const s = rmsseScale([0, 5, 5, 5]);
    expect(s).toMatchObject({ status: 'flat', scale: 0 });
    expect(Number.isNaN(rmsse([5], [4], s.scale))).toBe(true);
  });
  test('all-zero dollars give no weights; the level score is undefined with every series excluded', () => {
    expect(levelWeights([0, 0, 0])).toBeNull();
    expect(weightedLevelScore([0.5, 0.7], null)).toEqual({
      score: Number.NaN,
      excluded: 2,
      excludedWeight: 0,
    });
  });
  test('weights of any dollar vector sum to 1 (property)', () => {
    fc.assert(
      fc.property(
        fc.array(fc.double({ min: 0, max: 1e6, noNaN: true }), { minLength: 1, maxLength: 50 }),
        (d) => {
          const w = levelWeights(d);
          if (d.reduce((a, b) => a + b, 0) === 0) return w === null;
          return Math.abs(w!.reduce((a, b) => a + b, 0) - 1) < 1e-9;
        },
      ),
    );
  });
});

describe('bottom-up aggregation', () => {
  const bottom: BottomSeries[] = [
    { seriesId: 1, item_id: 'a', store_id: 's1', dept_id: 'd1', category_id: 'c1', region_id: 'r1' },
    { seriesId: 2, item_id: 'b', store_id: 's1', dept_id: 'd2', category_id: 'c1', region_id: 'r1' },
    { seriesId: 3, item_id: 'a', store_id: 's2', dept_id: 'd1', category_id: 'c1', region_id: 'r2' },
    { seriesId: 4, item_id: 'c', store_id: 's3', dept_id: 'd3', category_id: 'c2', region_id: 'r2' },
  ];
  test('every level covers all bottom series and preserves the grand total (property)', () => {
    fc.assert(
      fc.property(fc.array(fc.integer({ min: 0, max: 50 }), { minLength: 12, maxLength: 12 }), (vals) => {
        const v = Float64Array.from(vals);
        const total = vals.reduce((a, b) => a + b, 0);
        for (const level of HIERARCHY_LEVELS) {
          const g = groupBottom(level, bottom);
          const agg = aggregateBottomUp(v, g.groupOf, g.keys.length, 3);
          if (agg.reduce((a, b) => a + b, 0) !== total) return false;
        }
        return true;
      }),
    );
  });
  test('level sizes follow the hierarchy', () => {
    const sizes = HIERARCHY_LEVELS.map((l) => groupBottom(l, bottom).keys.length);
    expect(sizes).toEqual([1, 2, 3, 2, 3, 3, 4, 3, 4, 3, 4, 4]);
  });
});
