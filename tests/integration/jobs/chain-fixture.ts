import { writeFileSync } from 'node:fs';
import type { DbSession } from '../../../src/db/database.js';

/**
 * A small invented chain written straight into the raw tables, clean enough that no check
 * blocks: units are a deterministic hash of (series, day) in 1..6 (with zeros, a chain this
 * small shows natural 50% volume drops), prices change every few weeks by a few percent, the
 * calendar covers the history and the horizon.
 */
export interface ChainShape {
  readonly stores: number;
  readonly items: number;
  readonly firstDay: string;
  /** Days of sales from firstDay. */
  readonly days: number;
}

const UNITS = (series: string, day: string) =>
  `(1 + abs(hashint8extended(${series}::int8 * 100003 + (${day} - DATE '2000-01-01'), 7)) % 6)::int4`;

export async function seedChain(db: DbSession, c: ChainShape): Promise<void> {
  await db.query(
    `INSERT INTO stores (store_id, region_id)
     SELECT 'st' || lpad(s::text, 2, '0'), 'rg' || (s % 2) FROM generate_series(1, $1) s`,
    [c.stores],
  );
  await db.query(
    `INSERT INTO items (item_id, dept_id, category_id)
     SELECT 'it' || lpad(i::text, 3, '0'), 'dp' || (i % 3), 'ct' || (i % 2) FROM generate_series(1, $1) i`,
    [c.items],
  );
  await db.query(
    `INSERT INTO series (item_id, store_id) SELECT i.item_id, s.store_id FROM items i CROSS JOIN stores s
     ORDER BY s.store_id, i.item_id`,
  );
  await db.query(
    `INSERT INTO calendar_days (day) SELECT d::date FROM generate_series($1::date, $1::date + $2::int + 120, '1 day') d`,
    [c.firstDay, c.days],
  );
  await db.query(
    `INSERT INTO events (day, name, kind) VALUES ($1::date + 40, 'harvest fair', 'holiday'),
       ($1::date + 90, 'river regatta', 'sporting')`,
    [c.firstDay],
  );
  await addSalesDays(db, c.firstDay, c.days);
  // Prices for every week start (Saturday) of the span and the horizon.
  await db.query(
    `INSERT INTO prices (item_id, store_id, week_start, price)
     SELECT s.item_id, s.store_id, w::date,
       round((1.5 + (abs(hashtext(s.item_id)) % 300) / 100.0) * (1 + ((extract(epoch FROM w)::int8 / 604800 / 5) % 3) * 0.03), 2)
     FROM series s
     CROSS JOIN generate_series($1::date - ((extract(dow FROM $1::date)::int + 1) % 7), $1::date + $2::int + 60, '7 days') w`,
    [c.firstDay, c.days],
  );
}

/** Adds `n` days of sales starting `from` for every series (the SQL twin of `writeSalesCsv`). */
export async function addSalesDays(db: DbSession, from: string, n: number): Promise<void> {
  await db.query(
    `INSERT INTO sales (series_id, day, units)
     SELECT s.series_id, d::date, ${UNITS('s.series_id', 'd::date')}
     FROM series s CROSS JOIN generate_series($1::date, $1::date + $2::int - 1, '1 day') d`,
    [from, n],
  );
}

/** Writes one day of sales for every series as a long-layout CSV the loader reads. */
export async function writeSalesCsv(
  db: DbSession,
  day: string,
  path: string,
  override: (item: string, store: string) => number | undefined = () => undefined,
): Promise<number> {
  const rows = (
    await db.query<{ item_id: string; store_id: string; units: number }>(
      `SELECT item_id, store_id, ${UNITS('series_id', '$1::date')} AS units FROM series ORDER BY series_id`,
      [day],
    )
  ).rows;
  writeFileSync(
    path,
    `item_id,store_id,day,units\n${rows.map((r) => `${r.item_id},${r.store_id},${day},${override(r.item_id, r.store_id) ?? r.units}`).join('\n')}\n`,
  );
  return rows.length;
}

/** The feature set the runner tests build: every sales-derived family, small windows. */
export const SMALL_SET = {
  name: 'small',
  horizon: 7,
  mode: 'shift',
  training: { days: 45 },
  stockoutMask: true,
  families: {
    lags: { days: [7, 14] },
    windows: [{ size: 7, shift: 7, stats: ['mean', 'std', 'zero_share', 'ewm'] }],
    calendar: { features: ['day_of_week', 'event_name'], eventKinds: ['holiday'] },
    prices: { features: ['price', 'price_rel_max', 'price_momentum_1w'] },
    encodings: [{ groups: ['item', 'store_department'], window: 28, shift: 7, m: 20 }],
    hierarchy: [{ levels: ['store', 'item'], size: 7, shift: 7, stats: ['mean'] }],
  },
} as const;

/** Row count and md5 of every cell of the snapshot of (set, cutoff), in table order. */
export async function snapshotChecksum(
  db: DbSession,
  set: string,
  cutoff: string,
): Promise<{ rows: number; md5: string }> {
  const t = (
    await db.query<{ table_name: string }>(
      'SELECT table_name FROM snapshots WHERE set_name = $1 AND cutoff = $2',
      [set, cutoff],
    )
  ).rows[0];
  if (!t) throw new Error(`no snapshot ${set} ${cutoff}`);
  const r = await db.query<{ n: number; h: string }>(
    `SELECT count(*)::int8 AS n, md5(string_agg(x::text, '|' ORDER BY series_id, day, origin)) AS h FROM "${t.table_name}" x`,
  );
  return { rows: Number(r.rows[0]!.n), md5: r.rows[0]!.h };
}
