import fc from 'fast-check';
import { describe, expect, test } from 'vitest';
import { spikeScore, unitsSpikes } from '../../src/checks/units-sanity.js';

const score = (x: number, w: number[], minScale = 1) =>
  spikeScore(x, w, w.length, minScale, new Float64Array(w.length));
const rep = (v: number, n: number) => Array.from({ length: n }, () => v);

describe('spikeScore (modified z against the trailing window)', () => {
  test('MAD > 0: 0.6745 (x - median) / MAD', () => {
    // Window 1..28: median 14.5, MAD 7 (deviations 0.5..13.5, middle pair 6.5 and 7.5).
    // Scale 7 / 0.6745 = 10.378 > 1; x = 120 -> 0.6745 x 105.5 / 7 = 10.166.
    const w = Array.from({ length: 28 }, (_, i) => i + 1);
    const s = score(120, w);
    expect(s.median).toBe(14.5);
    expect(s.mad).toBe(7);
    expect(s.z).toBeCloseTo((0.6745 * 105.5) / 7, 10);
  });

  test('MAD 0: the scale falls back to 1.253314 x the mean absolute deviation', () => {
    // 20 days of 2 and 8 of 10: median 2, MAD 0; mean |dev| = 8 x 8 / 28 = 2.285714;
    // scale = 1.253314 x 2.285714 = 2.864718. x = 31 -> 29 / 2.864718 = 10.123 (> 10);
    // x = 30 -> 28 / 2.864718 = 9.774.
    const w = [...rep(2, 20), ...rep(10, 8)];
    expect(score(31, w).z).toBeCloseTo(29 / (1.253314 * (64 / 28)), 9);
    expect(score(31, w).z).toBeGreaterThan(10);
    expect(score(30, w).z).toBeLessThan(10);
  });

  test('a constant window uses the one-unit floor, so a slow seller selling 11 is a spike and 10 is not', () => {
    expect(score(11, rep(0, 28)).z).toBe(11);
    expect(score(10, rep(0, 28)).z).toBe(10);
    expect(score(10, rep(0, 28), 0.5).z).toBe(20);
  });

  test('a small MAD is floored too', () => {
    // 14 x 5 and 14 x 6: median 5.5, MAD 0.5 -> scale 0.741 < 1 -> floor 1; x = 20 -> 14.5.
    expect(score(20, [...rep(5, 14), ...rep(6, 14)]).z).toBe(14.5);
  });
});

test('unitsSpikes finds exactly the days a full scan with spikeScore flags (fast-check)', () => {
  // Slow sellers, steady ones with promotions, and gaps; windows odd and even.
  const day = fc.oneof(
    { weight: 4, arbitrary: fc.integer({ min: 0, max: 3 }) },
    { weight: 4, arbitrary: fc.integer({ min: 20, max: 30 }) },
    { weight: 1, arbitrary: fc.integer({ min: 0, max: 200 }) },
    { weight: 1, arbitrary: fc.constant(Number.NaN) },
  );
  fc.assert(
    fc.property(
      fc.array(day, { maxLength: 200 }),
      fc.integer({ min: 7, max: 30 }),
      fc.constantFrom(1, 2.5, 10),
      fc.constantFrom(0.5, 1),
      (units, window, spikeThreshold, minScale) => {
        const p = { window, spikeThreshold, minScale, minHistory: 3 };
        const naive: Array<{ day: number; z: number }> = [];
        for (let d = 0; d < units.length; d++) {
          const hist = units.slice(Math.max(0, d - window), d).filter((v) => !Number.isNaN(v));
          if (Number.isNaN(units[d]!) || hist.length < p.minHistory) continue;
          const s = spikeScore(units[d]!, hist, hist.length, minScale, new Float64Array(window));
          if (s.z > spikeThreshold) naive.push({ day: d, z: s.z });
        }
        const got = unitsSpikes(units, p, new Float64Array(window), new Float64Array(window));
        expect(got.map((s) => ({ day: s.day, z: s.score.z }))).toEqual(naive);
      },
    ),
    { numRuns: 500 },
  );
});

test('unitsSpikes: a window split exactly in half still yields its spike', () => {
  // Window 0,0,0,0,1,1,1,1 then 11: median (0 + 1) / 2 = 0.5, deviations all 0.5 so MAD 0.5,
  // scale max(0.5 / 0.6745, 1) = 1, z = (11 - 0.5) / 1 = 10.5 > 10. Four of the eight days lie
  // more than 10 below 11: the count alone cannot tell, the median must be taken.
  const units = [0, 0, 0, 0, 1, 1, 1, 1, 11];
  const p = { window: 8, spikeThreshold: 10, minScale: 1, minHistory: 8 };
  const got = unitsSpikes(units, p, new Float64Array(8), new Float64Array(8));
  expect(got.map((s) => [s.day, s.score.z, s.score.median, s.score.mad])).toEqual([[8, 10.5, 0.5, 0.5]]);
  // 10 units: z = 9.5, not a spike.
  expect(unitsSpikes([...units.slice(0, 8), 10], p, new Float64Array(8), new Float64Array(8))).toEqual([]);
});
