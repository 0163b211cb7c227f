import { createRequire } from 'node:module';
import { describe, expect, test } from 'vitest';
import { Prng } from '../../src/demo/prng.js';

// Reference library: jStat (npm `jstat`) for the negative binomial pmf and the chi-square cdf.
const { jStat } = createRequire(import.meta.url)('jstat') as {
  jStat: {
    negbin: { pdf(k: number, r: number, p: number): number };
    chisquare: { cdf(x: number, dof: number): number };
  };
};

/** Pearson chi-square p-value of observed counts against expected probabilities. */
function chiSquareP(observed: readonly number[], probs: readonly number[], n: number): number {
  let stat = 0;
  observed.forEach((o, i) => {
    const e = (probs[i] as number) * n;
    stat += ((o - e) * (o - e)) / e;
  });
  return 1 - jStat.chisquare.cdf(stat, observed.length - 1);
}

describe('Prng', () => {
  test('streams are reproducible and labels separate them', () => {
    const a = new Prng(42, 1, 2);
    const b = new Prng(42, 1, 2);
    const c = new Prng(42, 2, 1);
    const xs = Array.from({ length: 50 }, () => a.u32());
    expect(Array.from({ length: 50 }, () => b.u32())).toEqual(xs);
    expect(Array.from({ length: 50 }, () => c.u32())).not.toEqual(xs);
    expect(() => new Prng(1.5)).toThrow(/safe integer/);
  });

  test('floats are uniform on [0, 1) (chi-square over 20 bins)', () => {
    const rng = new Prng(7);
    const n = 200_000;
    const bins = new Array(20).fill(0);
    for (let i = 0; i < n; i++) {
      const u = rng.float();
      expect(u >= 0 && u < 1).toBe(true);
      bins[Math.floor(u * 20)]++;
    }
    expect(chiSquareP(bins, new Array(20).fill(1 / 20), n)).toBeGreaterThan(0.001);
  });

  test.each([
    [3, 2],
    [0.4, 1.2],
    [12, 5],
  ])('negative binomial mean %d shape %d follows the jStat pmf', (mean, shape) => {
    const rng = new Prng(99, Math.round(mean * 10));
    const n = 100_000;
    const p = shape / (shape + mean); // jStat's success probability for size `shape`
    const probs: number[] = [];
    let cum = 0;
    for (let k = 0; cum < 0.995; k++) {
      const pk = jStat.negbin.pdf(k, shape, p);
      probs.push(pk);
      cum += pk;
    }
    probs.push(1 - cum); // the tail
    const counts = new Array(probs.length).fill(0);
    for (let i = 0; i < n; i++) counts[Math.min(rng.negBinomial(mean, shape), probs.length - 1)]++;
    expect(chiSquareP(counts, probs, n)).toBeGreaterThan(0.001);
  });

  test('a huge shape is Poisson: zero chances from the Poisson table', () => {
    // REFERENCES.md §4: P(X = 0) = e^-1 = 0.3679 for lambda 1, e^-2 = 0.1353 for lambda 2.
    for (const [lambda, p0] of [
      [1, 0.3678794412],
      [2, 0.1353352832],
    ] as const) {
      const rng = new Prng(5, lambda);
      const n = 100_000;
      let zeros = 0;
      for (let i = 0; i < n; i++) if (rng.negBinomial(lambda, 1e9) === 0) zeros++;
      expect(Math.abs(zeros / n - p0)).toBeLessThan(0.005);
    }
  });

  test('large means keep the negative binomial moments', () => {
    const rng = new Prng(3);
    const mean = 150;
    const shape = 4;
    const n = 50_000;
    let s = 0;
    let s2 = 0;
    for (let i = 0; i < n; i++) {
      const x = rng.negBinomial(mean, shape);
      s += x;
      s2 += x * x;
    }
    const m = s / n;
    const v = s2 / n - m * m;
    expect(Math.abs(m / mean - 1)).toBeLessThan(0.02);
    expect(Math.abs(v / (mean + (mean * mean) / shape) - 1)).toBeLessThan(0.05);
  });
});
