import { describe, expect, test } from 'vitest';
import type { DailyTotals } from '../../src/checks/sales-pass.js';
import { volumeDrops } from '../../src/checks/volume-drop.js';

const P = { minShare: 0.5, weeks: 4, minWeeks: 4 };
const totals = (units: number[]): DailyTotals => ({
  firstDay: 19000,
  units: Float64Array.from(units),
  rows: Int32Array.from(units.map(() => 1)),
});

describe('volumeDrops', () => {
  test('a day below half of the same weekday median over four weeks is flagged', () => {
    const u = Array.from({ length: 36 }, () => 100);
    u[35] = 49; // day 35: baseline days 28, 21, 14, 7 -> median 100; 49 < 50
    u[34] = 50; // exactly half: not below
    expect(volumeDrops(totals(u), P)).toEqual([{ day: 19035, units: 49, median: 100, weeks: 4 }]);
  });

  test('the baseline is the same weekday only, and an even count takes the middle mean', () => {
    // Day 28's baseline: days 21, 14, 7, 0 = 100, 100, 60, 40 -> sorted 40, 60, 100, 100 -> median 80.
    const u = Array.from({ length: 29 }, (_, i): number => (i % 7 === 0 ? 1000 : 5));
    u[0] = 40;
    u[7] = 60;
    u[14] = 100;
    u[21] = 100;
    u[28] = 39.9;
    const drops = volumeDrops(totals(u), P);
    expect(drops).toEqual([{ day: 19028, units: 39.9, median: 80, weeks: 4 }]);
  });

  test('days without four weeks of history are not judged', () => {
    const u = Array.from({ length: 28 }, () => 100);
    u[7] = 0; // a one-week history: not judged with minWeeks 4
    expect(volumeDrops(totals(u), P)).toEqual([]);
    expect(volumeDrops(totals(u), { ...P, minWeeks: 1 })).toEqual([
      { day: 19007, units: 0, median: 100, weeks: 1 },
    ]);
  });

  test('a zero baseline flags nothing', () => {
    expect(volumeDrops(totals(Array.from({ length: 40 }, () => 0)), P)).toEqual([]);
  });
});
