import { formatDay, parseDay } from '../../src/core/days.js';
import type { DbSession } from '../../src/db/database.js';

/** Tiny chains for the evaluation tests, written straight into the raw tables. */
export interface Row {
  readonly item: string;
  readonly store: string;
  readonly day: string;
  readonly units: number;
}

/** Writes a tiny chain straight into the raw tables (the loader is tested on its own). */
export async function seedChain(
  s: DbSession,
  opts: {
    items: Array<[string, string, string]>;
    stores: Array<[string, string]>;
    sales: readonly Row[];
    prices?: Array<[string, string, string, number]>;
  },
): Promise<void> {
  await s.exec('TRUNCATE items, stores, series, sales, prices RESTART IDENTITY');
  for (const [item, dept, cat] of opts.items) {
    await s.query('INSERT INTO items VALUES ($1, $2, $3)', [item, dept, cat]);
  }
  for (const [store, region] of opts.stores)
    await s.query('INSERT INTO stores VALUES ($1, $2)', [store, region]);
  const pairs = [...new Set(opts.sales.map((r) => `${r.item}|${r.store}`))].sort();
  for (const p of pairs) {
    const [item, store] = p.split('|');
    await s.query('INSERT INTO series (item_id, store_id) VALUES ($1, $2)', [item, store]);
  }
  if (opts.sales.length) {
    await s.query(
      `INSERT INTO sales (series_id, day, units)
       SELECT se.series_id, d, u FROM unnest($1::text[], $2::text[], $3::date[], $4::int4[]) AS x(i, st, d, u)
       JOIN series se ON se.item_id = x.i AND se.store_id = x.st`,
      [
        opts.sales.map((r) => r.item),
        opts.sales.map((r) => r.store),
        opts.sales.map((r) => r.day),
        opts.sales.map((r) => r.units),
      ],
    );
  }
  for (const [item, store, week, price] of opts.prices ?? []) {
    await s.query('INSERT INTO prices VALUES ($1, $2, $3, $4)', [item, store, week, price]);
  }
}

/** A daily series as rows from `start`; zero days can be left out (they count as zero). */
export function seriesRows(
  item: string,
  store: string,
  start: string,
  units: readonly number[],
  skipZeros = false,
): Row[] {
  const d0 = parseDay(start)!;
  return units.flatMap((u, i) =>
    skipZeros && u === 0 ? [] : [{ item, store, day: formatDay(d0 + i), units: u }],
  );
}

// REFERENCES.md §5.3: item A train [0,0,3,1,4,2,5,3], item B [2,2,2,3,2,2,3,2], prices 2.00 and
// 5.00, one store, one department. 2024-01-01 is a Monday; price weeks start on Saturday.
export const A = [0, 0, 3, 1, 4, 2, 5, 3, 4, 2];
export const B = [2, 2, 2, 3, 2, 2, 3, 2, 2, 3];
export const CUTOFF = '2024-01-08';
export const twoItemChain = {
  items: [
    ['A', 'D1', 'C1'],
    ['B', 'D1', 'C1'],
  ] as Array<[string, string, string]>,
  stores: [['S1', 'R1']] as Array<[string, string]>,
  sales: [...seriesRows('A', 'S1', '2024-01-01', A, true), ...seriesRows('B', 'S1', '2024-01-01', B)],
  prices: [
    ['A', 'S1', '2023-12-30', 2],
    ['A', 'S1', '2024-01-06', 2],
    ['B', 'S1', '2023-12-30', 5],
    ['B', 'S1', '2024-01-06', 5],
  ] as Array<[string, string, string, number]>,
};
