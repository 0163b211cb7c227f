import fc from 'fast-check';
import { max, mean, min, sampleStandardDeviation } from 'simple-statistics';
import { describe, expect, test } from 'vitest';
import { NEVER } from '../../src/features/family.js';
import { type WindowStat, windowStats } from '../../src/features/window-engine.js';

const ALL: WindowStat[] = ['mean', 'std', 'min', 'max', 'zero_share', 'ewm'];

function run(
  values: number[],
  size: number,
  stats: WindowStat[],
  minDays: number,
  alpha = 0.5,
  maskFrom?: number[],
) {
  const v = Float64Array.from(values);
  const out = stats.map(() => new Float64Array(values.length));
  const mf = maskFrom ? Int32Array.from(maskFrom) : null;
  const events = mf
    ? Int32Array.from([...new Set(maskFrom!.filter((x) => x !== NEVER))].sort((a, b) => a - b))
    : null;
  windowStats(
    { base: 0, values: v, maskFrom: mf, maskEvents: events },
    { size, stats, minDays, alpha },
    0,
    values.length - 1,
    out,
  );
  return out.map((c) => Array.from(c));
}

describe('trailing windows', () => {
  test('the rolling fixture of REFERENCES.md section 8 (hand-computed, window 3, min periods 3)', () => {
    // REFERENCES.md §8 [HAND]: x = [3,1,4,1,5,9,2,6], right-aligned window 3.
    const [m, s] = run([3, 1, 4, 1, 5, 9, 2, 6], 3, ['mean', 'std'], 3);
    const mean3 = [Number.NaN, Number.NaN, 2.666667, 2.0, 3.333333, 5.0, 5.333333, 5.666667];
    const std3 = [Number.NaN, Number.NaN, 1.527525, 1.732051, 2.081666, 4.0, 3.511885, 3.511885];
    const same = (got: number | undefined, want: number) => {
      if (Number.isNaN(want)) expect(got).toBeNaN();
      else expect(got).toBeCloseTo(want, 6);
    };
    mean3.forEach((x, i) => {
      same(m![i], x);
    });
    std3.forEach((x, i) => {
      same(s![i], x);
    });
    // "Leakage-safe feature (shift 1 then roll 3) at index 3 = mean(3,1,4) = 2.666667": the window
    // ending one day before index 3 is the one ending at index 2.
    expect(m![3 - 1]).toBeCloseTo(2.666667, 6);
  });

  test('matches a direct recomputation (simple-statistics) on random series with gaps and masks', () => {
    fc.assert(
      fc.property(
        fc.array(fc.oneof(fc.integer({ min: 0, max: 30 }), fc.constant(0), fc.constant(Number.NaN)), {
          minLength: 1,
          maxLength: 80,
        }),
        fc.integer({ min: 1, max: 12 }),
        fc.integer({ min: 1, max: 5 }),
        fc.double({ min: 0.05, max: 0.95, noNaN: true }),
        fc.array(fc.tuple(fc.nat(79), fc.nat(15), fc.integer({ min: -5, max: 20 })), { maxLength: 4 }),
        (values, size, minDays, alpha, runs) => {
          const n = values.length;
          // Masks as the stock-out rule makes them: a run of days hidden from boundaries >= det.
          const maskFrom = new Array<number>(n).fill(NEVER);
          for (const [start, len, off] of runs) {
            const det = start + off;
            for (let d = start; d <= Math.min(n - 1, start + len); d++) maskFrom[d] = Math.max(0, det);
          }
          const got = run(values, size, ALL, minDays, alpha, maskFrom);
          for (let e = 0; e < n; e++) {
            const days: number[] = [];
            for (let d = Math.max(0, e - size + 1); d <= e; d++)
              if (!Number.isNaN(values[d]!) && maskFrom[d]! > e) days.push(d);
            const xs = days.map((d) => values[d]!);
            const ok = xs.length >= minDays;
            const want = [
              ok ? mean(xs) : Number.NaN,
              ok && xs.length >= 2 ? sampleStandardDeviation(xs) : Number.NaN,
              ok ? min(xs) : Number.NaN,
              ok ? max(xs) : Number.NaN,
              ok ? xs.filter((x) => x === 0).length / xs.length : Number.NaN,
              ok
                ? days.reduce((a, d) => a + values[d]! * (1 - alpha) ** (e - d), 0) /
                  days.reduce((a, d) => a + (1 - alpha) ** (e - d), 0)
                : Number.NaN,
            ];
            for (let k = 0; k < ALL.length; k++) {
              const g = got[k]![e]!;
              const w = want[k]!;
              if (Number.isNaN(w)) expect(g, `${ALL[k]} at ${e}`).toBeNaN();
              else
                expect(Math.abs(g - w), `${ALL[k]} at ${e}: ${g} vs ${w}`).toBeLessThanOrEqual(
                  1e-9 * Math.max(1, Math.abs(w)),
                );
            }
          }
        },
      ),
      { numRuns: 300 },
    );
  });

  test('the weighted mean has no cancellation error when a large value leaves the window', () => {
    const values = [1e9, 0, 0, 0, 0, 0, 0, 0, 0, 0];
    const [ewm] = run(values, 3, ['ewm'], 1, 0.5);
    expect(ewm![0]).toBe(1e9);
    for (let e = 3; e < values.length; e++) expect(ewm![e]).toBe(0);
  });
});
