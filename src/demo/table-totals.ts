import type { Db } from '../db/database.js';
import type { TableTotals } from './faults-file.js';

/** Row counts (and unit or price sums) of the raw tables, in the shape of faults.json's totals. */
export async function tableTotals(db: Db): Promise<TableTotals> {
  const count = async (table: string) =>
    (await db.query<{ n: number }>(`SELECT count(*)::int8 AS n FROM ${table}`)).rows[0]?.n ?? 0;
  const sales = (
    await db.query<{ n: number; u: number }>(
      'SELECT count(*)::int8 AS n, coalesce(sum(units), 0)::int8 AS u FROM sales',
    )
  ).rows[0];
  const prices = (
    await db.query<{ n: number; c: number }>(
      'SELECT count(*)::int8 AS n, coalesce(sum(round(price * 100)), 0)::int8 AS c FROM prices',
    )
  ).rows[0];
  return {
    items: { rows: await count('items') },
    stores: { rows: await count('stores') },
    series: { rows: await count('series') },
    sales: { rows: sales?.n ?? 0, units: sales?.u ?? 0 },
    prices: { rows: prices?.n ?? 0, price_cents: prices?.c ?? 0 },
    calendar_days: { rows: await count('calendar_days') },
    events: { rows: await count('events') },
    benefit_days: { rows: await count('benefit_days') },
  };
}
