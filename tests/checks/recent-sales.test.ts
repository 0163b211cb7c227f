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
    // Days 993..1000 into an array whose index 0 is day 993: nothing kept before 995.
    const days = (id: number) => {
      const out = new Float64Array(8).fill(Number.NaN);
      const rows = r.copy(id, 993, 1000, out, 993);
      return { rows, out: Array.from(out) };
    };
    const N = Number.NaN;
    expect(days(1)).toEqual({ rows: 4, out: [N, N, 6, 7, N, 9, 10, N] });
    expect(days(2)).toEqual({ rows: 2, out: [N, N, N, N, N, 0, 4, N] });
    expect(days(3)).toEqual({ rows: 0, out: [N, N, N, N, N, N, N, N] });
    expect([...recentFirstDays(STATE, 1000)!]).toEqual([
      [1, 990],
      [2, 998],
    ]);
    // Many series grow the shared array: each keeps its own days.
    const many = new RecentSalesKeeper(0, 1000);
    for (let id = 0; id < 3000; id++) many.add(id, 400 + (id % 7), new Float64Array(601 - (id % 7)).fill(id));
    many.finish(STATE);
    const m = recentSales(STATE, 0, 1000)!;
    const one = new Float64Array(1001).fill(Number.NaN);
    expect(m.copy(2999, 0, 1000, one, 0)).toBe(601 - (2999 % 7));
    expect([one[399 + (2999 % 7)], one[400 + (2999 % 7)], one[1000]]).toEqual([N, 2999, 2999]);
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
