import { day, formatDay } from '../../../src/core/days.js';
import type { Db } from '../../../src/db/database.js';

/** Hand-built raw tables for the checks' tests, written set-based with unnest. */
export async function clearTables(db: Db): Promise<void> {
  await db.exec(`TRUNCATE items, stores, series, sales, prices, calendar_days, events, benefit_days,
    rejected_rows, load_batches, findings, check_results, check_run_days, check_runs, waivers RESTART IDENTITY CASCADE`);
}

export async function addItems(
  db: Db,
  rows: ReadonlyArray<[string, string | null, string | null]>,
): Promise<void> {
  await db.query('INSERT INTO items SELECT * FROM unnest($1::text[], $2::text[], $3::text[])', [
    rows.map((r) => r[0]),
    rows.map((r) => r[1]),
    rows.map((r) => r[2]),
  ]);
}

export async function addStores(db: Db, rows: ReadonlyArray<[string, string | null]>): Promise<void> {
  await db.query('INSERT INTO stores SELECT * FROM unnest($1::text[], $2::text[])', [
    rows.map((r) => r[0]),
    rows.map((r) => r[1]),
  ]);
}

/** Every day from `from` to `to` into calendar_days. */
export async function addCalendar(db: Db, from: string, to: string): Promise<void> {
  await db.query(
    `INSERT INTO calendar_days SELECT g::date FROM generate_series($1::date, $2::date, interval '1 day') g`,
    [from, to],
  );
}

/**
 * One series' daily units from `first` on; NaN (or null) leaves the day without a row. Returns
 * the series id.
 */
export async function addSeries(
  db: Db,
  item: string,
  store: string,
  first: string,
  units: ReadonlyArray<number | null>,
): Promise<number> {
  const res = await db.query<{ series_id: number }>(
    'INSERT INTO series (item_id, store_id) VALUES ($1, $2) RETURNING series_id',
    [item, store],
  );
  const id = res.rows[0]!.series_id;
  const f = day(first);
  const days: string[] = [];
  const vals: number[] = [];
  units.forEach((u, i) => {
    if (u === null || Number.isNaN(u)) return;
    days.push(formatDay(f + i));
    vals.push(u);
  });
  await db.query('INSERT INTO sales SELECT $1, * FROM unnest($2::date[], $3::int4[])', [id, days, vals]);
  return id;
}

/** Weekly prices from `firstWeek` on, one per 7 days; null leaves the week without a price. */
export async function addPrices(
  db: Db,
  item: string,
  store: string,
  firstWeek: string,
  prices: ReadonlyArray<number | null>,
): Promise<void> {
  const f = day(firstWeek);
  const weeks: string[] = [];
  const vals: number[] = [];
  prices.forEach((p, i) => {
    if (p === null) return;
    weeks.push(formatDay(f + 7 * i));
    vals.push(p);
  });
  await db.query('INSERT INTO prices SELECT $1, $2, * FROM unnest($3::date[], $4::numeric[])', [
    item,
    store,
    weeks,
    vals,
  ]);
}

/** Deterministic pseudo-random stream (mulberry32) for test data that must not be hand-typed. */
export function rng(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Poisson draws by inversion (small means only), for realistic but reproducible counts. */
export function poissonDays(n: number, mean: number, seed: number): number[] {
  const r = rng(seed);
  const out: number[] = [];
  for (let i = 0; i < n; i++) {
    let k = 0;
    let p = Math.exp(-mean);
    let s = p;
    const u = r();
    while (u > s && k < 1000) {
      k++;
      p *= mean / k;
      s += p;
    }
    out.push(k);
  }
  return out;
}
