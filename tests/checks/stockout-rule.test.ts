import fc from 'fast-check';
import jstatPkg from 'jstat';
import { describe, expect, test } from 'vitest';
import {
  classifyZeroRuns,
  criticalRunLength,
  reportedZeroRuns,
  type StockoutParams,
  zeroProbability,
} from '../../src/checks/stockout-rule.js';

const { jStat } = jstatPkg;

const rep = (v: number, n: number) => Array.from({ length: n }, () => v);
const P001: StockoutParams = { alpha: 0.001, lookback: 56, minHistory: 14 };

describe('zeroProbability: Poisson case against REFERENCES.md section 4', () => {
  // P(X = 0) = e^-lambda; values from REFERENCES.md section 4 ([LIB] closed form, scipy).
  test.each([
    [0.1, 0.904837418],
    [0.5, 0.6065306597],
    [1, 0.3678794412],
    [2, 0.1353352832],
    [5, 0.006737947],
  ])('lambda %s -> %s', (mu, p0) => {
    // Variance equal to the mean: no overdispersion, so the rule uses the Poisson zero chance.
    expect(zeroProbability(mu, mu)).toBeCloseTo(p0, 9);
    expect(zeroProbability(mu, 0)).toBeCloseTo(p0, 9);
    // jstat's Poisson pmf at 0, an independent implementation.
    expect(zeroProbability(mu, mu)).toBeCloseTo(jStat.poisson.pdf(0, mu), 12);
  });

  // Runs of zeros: P(k zeros) = e^(-lambda k), REFERENCES.md section 4 table.
  test.each([
    [0.5, 7, 0.0301973834],
    [0.1, 28, 0.0608100626],
    [0.2, 14, 0.0608100626],
    [1, 3, 0.0497870684],
    [2, 2, 0.0183156389],
  ])('lambda %s, %s zero days -> %s', (mu, k, p) => {
    expect(zeroProbability(mu, mu) ** k).toBeCloseTo(p, 9);
  });

  test('no sales at all: a zero is certain', () => {
    expect(zeroProbability(0, 0)).toBe(1);
  });
});

describe('zeroProbability: negative binomial by moments', () => {
  // r = mu^2 / (s2 - mu), success probability p = r / (r + mu); the NB pmf at 0 is p^r.
  // jstat's negbin.pdf(k, r, p) = C(k + r - 1, k) (1 - p)^k p^r, an independent implementation.
  test.each([
    [3, 4.5], // r = 9 / 1.5 = 6
    [2, 6], // r = 4 / 4 = 1
    [2.5, 5], // r = 6.25 / 2.5 = 2.5 (non-integer r)
    [4, 10], // r = 16 / 6 = 2.667
    [1.5, 2.25], // r = 2.25 / 0.75 = 3
  ])('mu %s, variance %s matches jstat negbin.pdf(0)', (mu, s2) => {
    const r = (mu * mu) / (s2 - mu);
    expect(zeroProbability(mu, s2)).toBeCloseTo(jStat.negbin.pdf(0, r, r / (r + mu)), 12);
  });

  test('hand-worked: mu 3, variance 4.5', () => {
    // r = 3^2 / (4.5 - 3) = 9 / 1.5 = 6; p0 = (6 / (6 + 3))^6 = (2/3)^6 = 64/729 = 0.0877914952.
    expect(zeroProbability(3, 4.5)).toBeCloseTo(64 / 729, 12);
  });

  test('hand-worked: r below 1 (mu 1, variance 5)', () => {
    // r = 1 / (5 - 1) = 0.25; p0 = (0.25 / 1.25)^0.25 = 0.2^0.25 = sqrt(sqrt(0.2)) = sqrt(0.4472136) = 0.6687403.
    expect(zeroProbability(1, 5)).toBeCloseTo(0.6687403, 7);
  });

  test('a variance barely above the mean tends to the Poisson value (no loss of digits)', () => {
    // r = 0.04 / 4e-17 = 1e15: the plain power (r / (r + mu))^r would return garbage here.
    expect(zeroProbability(0.2, 0.2 + 4e-17)).toBeCloseTo(Math.exp(-0.2), 12);
    expect(zeroProbability(3, 3 + 1e-9)).toBeCloseTo(Math.exp(-3), 9);
  });

  test('overdispersion raises the zero chance above Poisson', () => {
    expect(zeroProbability(2, 6)).toBeGreaterThan(zeroProbability(2, 2));
  });
});

describe('criticalRunLength', () => {
  test('Poisson mu 2, alpha 0.001 -> k* = 4', () => {
    // p0 = e^-2. e^(-2k) < 0.001 first at k = 4: e^-8 = 0.000335 < 0.001, e^-6 = 0.00248 > 0.001.
    // ln 0.001 / ln e^-2 = -6.9078 / -2 = 3.4539, ceil = 4.
    expect(criticalRunLength(Math.exp(-2), 0.001)).toBe(4);
  });

  test('negative binomial mu 2, variance 6, alpha 0.001 -> k* = 7', () => {
    // r = 4 / (6 - 2) = 1, p0 = (1 / 3)^1 = 0.3333. (1/3)^6 = 1/729 = 0.00137 > 0.001;
    // (1/3)^7 = 1/2187 = 0.000457 < 0.001. ln 0.001 / ln(1/3) = 6.9078 / 1.0986 = 6.288, ceil = 7.
    expect(criticalRunLength(zeroProbability(2, 6), 0.001)).toBe(7);
  });

  test('negative binomial mu 2, variance 6, alpha 1e-6 -> k* = 13', () => {
    // (1/3)^12 = 1.88e-6 > 1e-6; (1/3)^13 = 6.27e-7 < 1e-6. 13.8155 / 1.0986 = 12.575, ceil = 13.
    expect(criticalRunLength(1 / 3, 1e-6)).toBe(13);
  });

  test('a ratio that is an integer in exact arithmetic does not round up', () => {
    // p0 = 0.1, alpha = 1e-6: 0.1^6 = 1e-6 exactly at k = 6 ("at or below alpha").
    expect(criticalRunLength(0.1, 1e-6)).toBe(6);
  });

  test('degenerate zero chances', () => {
    expect(criticalRunLength(1, 1e-6)).toBe(Number.POSITIVE_INFINITY);
    expect(criticalRunLength(Number.NaN, 1e-6)).toBe(Number.POSITIVE_INFINITY);
    expect(criticalRunLength(0, 1e-6)).toBe(1);
  });
});

describe('classifyZeroRuns: hand-worked series', () => {
  test('14 days of 2 units then 4 zeros: a stock-out detectable on its 4th day', () => {
    // History: 14 days of 2 -> mean 2, sample variance 0 -> Poisson, p0 = e^-2, k* = 4 at alpha 0.001.
    const u = [...rep(2, 14), 0, 0, 0, 0, 2];
    const [run] = classifyZeroRuns(u, P001);
    expect(run).toMatchObject({
      start: 14,
      end: 17,
      kind: 'stockout',
      mean: 2,
      variance: 0,
      kStar: 4,
      detectable: 17,
    });
    expect(run!.p0).toBeCloseTo(Math.exp(-2), 12);
  });

  test('three zeros after the same history are plausible', () => {
    const [run] = classifyZeroRuns([...rep(2, 14), 0, 0, 0, 2], P001);
    expect(run).toMatchObject({ kind: 'plausible', kStar: 4, detectable: -1 });
  });

  test('overdispersed history: negative binomial k* = 7', () => {
    // History 1,5 alternating for 14 days: mean 3, sample variance 14 * 2^2 / 13 = 4.3077 > 3, so
    // negative binomial: r = 9 / 1.3077 = 6.8824, p0 = (6.8824 / 9.8824)^6.8824 = e^(6.8824 ln 0.69643)
    // = e^-2.4899 = 0.0829; k* = ceil(6.9078 / 2.4899) = ceil(2.774) = 3.
    const hist = Array.from({ length: 14 }, (_, i) => (i % 2 ? 5 : 1));
    const [run] = classifyZeroRuns([...hist, 0, 0, 0, 1], P001);
    expect(run!.mean).toBeCloseTo(3, 12);
    expect(run!.variance).toBeCloseTo(56 / 13, 12);
    const r = 9 / (56 / 13 - 3);
    expect(run!.p0).toBeCloseTo((r / (r + 3)) ** r, 12);
    expect(run!.p0).toBeCloseTo(0.0829, 4);
    expect(run).toMatchObject({ kind: 'stockout', kStar: 3, detectable: 16 });
  });

  test('leading zeros are pre-launch, and never count as history', () => {
    // Ten zeros before the first sale, 14 days of 2, then 4 zeros. Counting the pre-launch
    // zeros as history would give mean 28/24 = 1.17 and no stock-out; excluding them gives mean 2.
    const runs = classifyZeroRuns([...rep(0, 10), ...rep(2, 14), 0, 0, 0, 0, 2], P001);
    expect(runs.map((r) => r.kind)).toEqual(['pre-launch', 'stockout']);
    expect(runs[0]).toMatchObject({ start: 0, end: 9, detectable: -1 });
    expect(runs[1]).toMatchObject({ start: 24, end: 27, mean: 2, kStar: 4 });
  });

  test('a run still open at the end is open, with the day it became improbable', () => {
    const [run] = classifyZeroRuns([...rep(2, 14), 0, 0, 0, 0, 0], P001);
    expect(run).toMatchObject({ kind: 'open', start: 14, end: 18, kStar: 4, detectable: 17 });
  });

  test('an open run shorter than k* is open and not yet detectable', () => {
    const [run] = classifyZeroRuns([...rep(2, 14), 0, 0], P001);
    expect(run).toMatchObject({ kind: 'open', detectable: -1 });
  });

  test('a series with no sale at all is one pre-launch run', () => {
    const runs = classifyZeroRuns(rep(0, 30), P001);
    expect(runs).toHaveLength(1);
    expect(runs[0]).toMatchObject({ kind: 'pre-launch', start: 0, end: 29 });
  });

  test('too little history: unjudged', () => {
    const [run] = classifyZeroRuns([...rep(2, 10), ...rep(0, 20), 2], P001);
    expect(run).toMatchObject({ kind: 'unjudged', kStar: Number.POSITIVE_INFINITY });
  });

  test('missing days (NaN) neither count as history nor extend a run', () => {
    const u = [...rep(2, 14), Number.NaN, 0, 0, 0, 0, Number.NaN, 0, 2];
    const runs = classifyZeroRuns(u, P001);
    expect(runs.map((r) => [r.start, r.end, r.kind])).toEqual([
      [15, 18, 'stockout'],
      [20, 20, 'plausible'],
    ]);
    // The second run's history: 14 twos; the flagged run's zeros are left out.
    expect(runs[1]).toMatchObject({ mean: 2, variance: 0 });
  });

  test('days of a flagged run are left out of later runs history', () => {
    // Without the exclusion the second run would see 14 twos and 10 zeros: mean 1.17.
    const u = [...rep(2, 14), ...rep(0, 10), 2, 0, 0, 0, 0, 2];
    const runs = classifyZeroRuns(u, P001);
    expect(runs.map((r) => r.kind)).toEqual(['stockout', 'stockout']);
    expect(runs[1]!.mean).toBe(2);
  });

  test('only the lookback window counts', () => {
    // 60 days of 10 then 7 days of 1: with lookback 7 the rate is 1 (p0 e^-1, k* = 7 at 0.001).
    const u = [...rep(10, 60), ...rep(1, 7), ...rep(0, 7), 1];
    const [run] = classifyZeroRuns(u, { alpha: 0.001, lookback: 7, minHistory: 7 });
    expect(run).toMatchObject({ mean: 1, kStar: 7, kind: 'stockout' });
  });
});

/** The rule written the slow, obvious way: re-scan the lookback for every run. */
function naive(units: number[], p: StockoutParams) {
  const n = units.length;
  const flagged = new Uint8Array(n);
  const firstSale = units.findIndex((v) => v > 0);
  const out: Array<[number, number, string, number]> = [];
  let i = 0;
  while (i < n) {
    if (units[i] !== 0) {
      i++;
      continue;
    }
    const start = i;
    while (i < n && units[i] === 0) i++;
    const end = i - 1;
    if (firstSale < 0 || start < firstSale) {
      out.push([start, end, 'pre-launch', Number.POSITIVE_INFINITY]);
      continue;
    }
    const hist: number[] = [];
    for (let j = Math.max(firstSale, start - p.lookback); j < start; j++) {
      if (!Number.isNaN(units[j]!) && !flagged[j]) hist.push(units[j]!);
    }
    const open = end === n - 1;
    if (hist.length < p.minHistory) {
      out.push([start, end, open ? 'open' : 'unjudged', Number.POSITIVE_INFINITY]);
      continue;
    }
    const mean = hist.reduce((a, b) => a + b, 0) / hist.length;
    const variance = hist.length > 1 ? hist.reduce((a, b) => a + (b - mean) ** 2, 0) / (hist.length - 1) : 0;
    const k = criticalRunLength(zeroProbability(mean, variance), p.alpha);
    const kind = open ? 'open' : end - start + 1 >= k ? 'stockout' : 'plausible';
    if (kind === 'stockout') flagged.fill(1, start, end + 1);
    out.push([start, end, kind, k]);
  }
  return out;
}

test('the sliding-window implementation agrees with a re-scanning one (fast-check)', () => {
  const day = fc.oneof(
    { weight: 5, arbitrary: fc.integer({ min: 0, max: 6 }) },
    { weight: 4, arbitrary: fc.constant(0) },
    { weight: 1, arbitrary: fc.constant(Number.NaN) },
  );
  fc.assert(
    fc.property(fc.array(day, { maxLength: 200 }), fc.integer({ min: 3, max: 40 }), (units, lookback) => {
      const p: StockoutParams = { alpha: 0.01, lookback, minHistory: 3 };
      const got = classifyZeroRuns(units, p).map((r) => [r.start, r.end, r.kind, r.kStar]);
      expect(got).toEqual(naive(units, p));
    }),
    { numRuns: 300 },
  );
});

test('reportedZeroRuns is classifyZeroRuns keeping stock-outs and open runs past k* (fast-check)', () => {
  // Slow sellers (many short runs the Poisson bound passes over) and faster ones, with gaps.
  const day = fc.oneof(
    { weight: 3, arbitrary: fc.integer({ min: 0, max: 3 }) },
    { weight: 2, arbitrary: fc.integer({ min: 0, max: 40 }) },
    { weight: 4, arbitrary: fc.constant(0) },
    { weight: 1, arbitrary: fc.constant(Number.NaN) },
  );
  fc.assert(
    fc.property(
      fc.array(day, { maxLength: 300 }),
      fc.constantFrom(1e-6, 1e-3, 0.05, 0.5),
      fc.integer({ min: 7, max: 56 }),
      (units, alpha, lookback) => {
        const p: StockoutParams = { alpha, lookback, minHistory: 3 };
        const all = classifyZeroRuns(units, p).filter(
          (r) => r.kind === 'stockout' || (r.kind === 'open' && r.detectable >= 0),
        );
        expect(reportedZeroRuns(units, p)).toEqual(all);
      },
    ),
    { numRuns: 500 },
  );
});
