import fc from 'fast-check';
import { describe, expect, test } from 'vitest';
import { judgePrice, withinBaseline } from '../../src/checks/price-spikes.js';

/** The published rule without the MAD floor, and the default floor of 10% of the median. */
const P = { threshold: 3.5, minHistoryWeeks: 4, ratio: 3, minRelativeMad: 0 };
const FLOORED = { ...P, minRelativeMad: 0.1 };
const judge = (price: number, base: number[]) =>
  judgePrice(price, base, base.length, P, new Float64Array(base.length));

describe('judgePrice', () => {
  test('the worked example of REFERENCES.md 3.6 (Iglewicz and Hoaglin 1993)', () => {
    // Baseline [10,11,11,12,12,12,13,13,17,18]: median 12, MAD 1 (deviations 0,0,0,1,1,1,1,2,5,6).
    const base = [10, 11, 11, 12, 12, 12, 13, 13, 17, 18];
    expect(judge(40, base)).toMatchObject({ rule: 'modified-z', median: 12, mad: 1 });
    expect(judge(40, base)!.observed).toBeCloseTo(18.886, 3);
    expect(judge(17, base)).toBeNull(); // 3.3725 < 3.5
    expect(judge(18, base)!.observed).toBeCloseTo(4.047, 3);
    expect(judge(6, base)!.observed).toBeCloseTo(4.047, 3); // two-sided
  });

  test('MAD 0: the ratio rule [1/3, 3]', () => {
    const base = Array.from({ length: 13 }, () => 2.99);
    expect(judge(8.99, base)).toMatchObject({ rule: 'ratio' }); // 3.007
    expect(judge(8.97, base)).toBeNull(); // exactly 3: inside
    expect(judge(0.99, base)).toMatchObject({ rule: 'ratio' }); // 0.331 < 0.3333
    expect(judge(1.0, base)).toBeNull(); // 0.3344
    expect(judge(2.2, base)).toBeNull(); // a 26% promotion
  });

  test('a short baseline uses the ratio rule only', () => {
    expect(judge(3.5, [1])).toMatchObject({ rule: 'ratio', observed: 3.5, median: 1 });
    expect(judge(2.5, [1])).toBeNull();
    // Three weeks 2.0, 2.1, 2.2: median 2.1, MAD 0.1, so z(3.0) = 0.6745 x 0.9 / 0.1 = 6.07 would
    // flag; below four weeks only the ratio counts (3.0 / 2.1 = 1.43). With a fourth week 2.1 the
    // MAD is 0.05 and z = 12.1.
    expect(judge(3.0, [2, 2.1, 2.2])).toBeNull();
    expect(judge(3.0, [2, 2.1, 2.2, 2.1])).toMatchObject({ rule: 'modified-z' });
  });

  test('a MAD below 10% of the median is floored there (the default)', () => {
    // Six weeks at 5.0, six at 5.2, one at 5.1: median 5.1, MAD 0.1 (2% of the median).
    // Unfloored, 6.2 (+22%) scores 0.6745 x 1.1 / 0.1 = 7.42; floored at 0.1 x 5.1 = 0.51 it scores
    // 0.6745 x 1.1 / 0.51 = 1.45 (no flag), and 8.0 (+57%) scores 0.6745 x 2.9 / 0.51 = 3.84.
    const base = [5, 5, 5, 5, 5, 5, 5.2, 5.2, 5.2, 5.2, 5.2, 5.2, 5.1];
    const floored = (price: number) => judgePrice(price, base, 13, FLOORED, new Float64Array(13));
    expect(judge(6.2, base)!.observed).toBeCloseTo((0.6745 * 1.1) / 0.1, 6);
    expect(floored(6.2)).toBeNull();
    expect(floored(8.0)!.observed).toBeCloseTo((0.6745 * 2.9) / 0.51, 9);
    // The worked example's MAD (1 against a median of 12) is below the floor too: 40 still flags.
    const ref = [10, 11, 11, 12, 12, 12, 13, 13, 17, 18];
    expect(judgePrice(40, ref, 10, FLOORED, new Float64Array(10))!.observed).toBeCloseTo(
      (0.6745 * 28) / 1.2,
      9,
    );
    expect(judgePrice(18, ref, 10, FLOORED, new Float64Array(10))).toBeNull();
  });

  test('no baseline: not judged', () => {
    expect(judge(100, [])).toBeNull();
  });
});

describe('withinBaseline (the shortcut that skips the median)', () => {
  test('never skips a price judgePrice would flag (fast-check)', () => {
    const price = fc.double({ min: 0.01, max: 100, noNaN: true });
    fc.assert(
      fc.property(
        fc.array(price, { minLength: 1, maxLength: 13 }),
        price,
        fc.constantFrom(0, 0.05, 0.1, 0.3),
        (base, x, f) => {
          const p = { ...P, minRelativeMad: f };
          const lo = Math.min(...base);
          const hi = Math.max(...base);
          if (withinBaseline(x, lo, hi, p))
            expect(judgePrice(x, base, base.length, p, new Float64Array(base.length))).toBeNull();
        },
      ),
      { numRuns: 2000 },
    );
  });

  test('skips the regular price, not a step outside the range', () => {
    expect(withinBaseline(2.99, 2.49, 2.99, FLOORED)).toBe(true); // 0.6745 x 0.5 / 0.249 = 1.35
    expect(withinBaseline(3.49, 2.49, 2.99, FLOORED)).toBe(false);
    expect(withinBaseline(2.99, 2.99, 2.99, P)).toBe(true);
    expect(withinBaseline(2.99, 2.49, 2.99, P)).toBe(false); // no floor: the z-score must be computed
  });
});
