import { afterEach, describe, expect, it } from 'vitest';
import {
  forgetRecentSales,
  RecentSalesKeeper,
  recentFirstDays,
  recentSales,
} from '../../src/checks/recent-sales.js';
import { NO_ROW } from '../../src/checks/sales-blocks.js';

const STATE = { coveredTo: 1000, last: 7, count: 7 };

afterEach(() => forgetRecentSales());

describe('recent days kept by the check pass', () => {
  it('keeps the newest days of each series, a missing day as no row', () => {
    const k = new RecentSalesKeeper(995, 1000);
    // Days 990..999: the first five lie before the kept span; day 997 has no row.
    k.add(1, 990, Float64Array.from([1, 2, 3, 4, 5, 6, 7, Number.NaN, 9, 10]));
    k.add(2, 998, Float64Array.from([0, 4]));
    k.finish(STATE);
    const r = recentSales(STATE, 995, 1000)!;
    expect(r.series.get(1)!.first).toBe(995);
    expect(Array.from(r.series.get(1)!.units)).toEqual([6, 7, NO_ROW, 9, 10]);
    expect(Array.from(r.series.get(2)!.units)).toEqual([0, 4]);
    expect([...recentFirstDays(STATE, 1000)!]).toEqual([
      [1, 990],
      [2, 998],
    ]);
  });

  it('gives nothing for another state of the blocks, or days it does not hold', () => {
    const k = new RecentSalesKeeper(995, 1000);
    k.add(1, 990, new Float64Array(10).fill(1));
    k.finish(STATE);
    for (const other of [
      { ...STATE, coveredTo: 1001 },
      { ...STATE, last: 8 },
      { ...STATE, count: 8 },
    ]) {
      expect(recentSales(other, 995, 1000)).toBeNull();
      expect(recentFirstDays(other, 1000)).toBeNull();
    }
    expect(recentSales(STATE, 994, 1000)).toBeNull();
    expect(recentSales(STATE, 995, 1001)).toBeNull();
    expect(recentFirstDays(STATE, 1001)).toBeNull();
    expect(recentSales(STATE, 996, 999)).not.toBeNull();
  });

  it('keeps nothing when a stored value cannot be told from no row, or the pass did not finish', () => {
    const a = new RecentSalesKeeper(995, 1000);
    a.add(1, 998, Float64Array.from([1, NO_ROW, 2]));
    a.finish(STATE);
    expect(recentSales(STATE, 995, 1000)).toBeNull();
    const b = new RecentSalesKeeper(995, 1000);
    b.add(1, 998, Float64Array.from([1, 2, 3]));
    b.finish(STATE);
    // A new pass forgets the old days at once, before it has finished.
    new RecentSalesKeeper(995, 1000).add(1, 998, Float64Array.from([5]));
    expect(recentSales(STATE, 995, 1000)).toBeNull();
  });
});
