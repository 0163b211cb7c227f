import fc from 'fast-check';
import * as ss from 'simple-statistics';
import { describe, expect, test } from 'vitest';
import {
  median,
  medianAbsoluteDeviation,
  medianAndMad,
  modifiedZ,
  selectInPlace,
} from '../../src/checks/robust-stats.js';

describe('median and MAD against REFERENCES.md section 3', () => {
  test('3.2: x = 1..9 -> median 5, raw MAD 2', () => {
    // R stats::mad docs example mad(c(1:9)); raw MAD 2 (scaled 2.9652 = 1.4826 x 2).
    const x = [1, 2, 3, 4, 5, 6, 7, 8, 9];
    expect(median(x)).toBe(5);
    expect(medianAbsoluteDeviation(x)).toBe(2);
  });

  test('3.3: an outlier does not move the MAD (1..8, 100 -> 2)', () => {
    expect(medianAbsoluteDeviation([1, 2, 3, 4, 5, 6, 7, 8, 100])).toBe(2);
  });

  test('3.4: even n -> median 4, MAD 2.5 (mean of the two middle deviations)', () => {
    const x = [1, 2, 3, 5, 7, 8];
    expect(median(x)).toBe(4);
    expect(medianAbsoluteDeviation(x)).toBe(2.5);
  });

  test('3.7: degenerate MAD is 0', () => {
    expect(medianAbsoluteDeviation([10, 10, 10, 10, 10, 10, 10, 100])).toBe(0);
  });
});

describe('modified z-score: the Iglewicz and Hoaglin (1993) worked example, REFERENCES.md 3.6', () => {
  // x = [10,11,11,12,12,12,13,13,17,18,40]: median 12, MAD 1; M = 0.6745 (x - 12) / 1.
  const x = [10, 11, 11, 12, 12, 12, 13, 13, 17, 18, 40];
  const med = median(x);
  const mad = medianAbsoluteDeviation(x);
  test('median 12, MAD 1', () => {
    expect(med).toBe(12);
    expect(mad).toBe(1);
  });
  test.each([
    [10, -1.349],
    [11, -0.6745],
    [12, 0],
    [13, 0.6745],
    [17, 3.3725],
    [18, 4.047],
    [40, 18.886],
  ])('M(%s) = %s', (v, m) => {
    expect(modifiedZ(v, med, mad)).toBeCloseTo(m, 3);
  });
  test('flags 18 and 40 (|M| > 3.5), not 17', () => {
    expect(x.filter((v) => Math.abs(modifiedZ(v, med, mad)) > 3.5)).toEqual([18, 40]);
  });
});

describe('against simple-statistics', () => {
  test('median and unscaled MAD agree on random samples', () => {
    fc.assert(
      fc.property(
        fc.array(fc.double({ min: -1e6, max: 1e6, noNaN: true }), { minLength: 1, maxLength: 60 }),
        (x) => {
          expect(median(x)).toBeCloseTo(ss.median(x), 9);
          expect(medianAbsoluteDeviation(x)).toBeCloseTo(ss.medianAbsoluteDeviation(x), 9);
          const scratch = new Float64Array(x.length);
          const both = medianAndMad(x, x.length, scratch);
          expect(both.median).toBeCloseTo(ss.median(x), 9);
          expect(both.mad).toBeCloseTo(ss.medianAbsoluteDeviation(x), 9);
        },
      ),
      { numRuns: 300 },
    );
  });

  test('selection puts the k-th smallest value in place, with duplicates and ties', () => {
    fc.assert(
      fc.property(
        fc.array(fc.integer({ min: -5, max: 5 }), { minLength: 1, maxLength: 40 }),
        fc.nat(),
        (x, k0) => {
          const k = k0 % x.length;
          const a = Float64Array.from(x);
          const v = selectInPlace(a, k);
          const sorted = [...x].sort((p, q) => p - q);
          expect(v).toBe(sorted[k]);
          for (let i = 0; i < k; i++) expect(a[i]).toBeLessThanOrEqual(v);
          for (let i = k + 1; i < a.length; i++) expect(a[i]).toBeGreaterThanOrEqual(v);
          expect([...a].sort((p, q) => p - q)).toEqual(sorted);
        },
      ),
      { numRuns: 500 },
    );
  });

  test('medianAndMad leaves its input alone and reads only the first n values', () => {
    const x = [5, 1, 4, 2, 3, 1000];
    const r = medianAndMad(x, 5, new Float64Array(6));
    expect(r).toEqual({ median: 3, mad: 1 });
    expect(x).toEqual([5, 1, 4, 2, 3, 1000]);
  });
});
