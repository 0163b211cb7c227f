import type { Db } from '../../src/db/database.js';

/**
 * Snapshot tables made by hand, following docs/contracts.md ("Snapshots") to the letter, so the
 * export is tested apart from the build (tests/integration/export-built.test.ts exports real ones).
 */
export const FEATURES = [
  { name: 'lag_7', type: 'float8', family: 'lags', description: 'units 7 days before the target day' },
  {
    name: 'mean_28',
    type: 'float8',
    family: 'windows',
    description: 'mean units over 28 days up to the boundary',
  },
  { name: 'price_ratio', type: 'float8', family: 'prices', description: 'price over its 52-week mean' },
];

export interface SnapshotSpec {
  readonly set: string;
  readonly cutoff: string;
  readonly table: string;
  /** Series in the chain (items item_001.. in stores S1, S2). */
  readonly series: number;
  /** Training days before and including the cutoff. */
  readonly days: number;
  readonly horizon: number;
  readonly mode?: 'shift' | 'origin';
  /** Store the rows in a scrambled physical order (the export must still come out sorted). */
  readonly scramble?: boolean;
}

/** Creates items, stores, series (once) and a snapshot table with its catalogue row. */
export async function makeSnapshot(db: Db, spec: SnapshotSpec): Promise<void> {
  const stores = 2;
  const items = Math.ceil(spec.series / stores);
  await db.query(
    `INSERT INTO items SELECT 'item_' || lpad(i::text, 3, '0'), 'D' || (i % 3), 'C' || (i % 2)
     FROM generate_series(1, $1::int) i ON CONFLICT DO NOTHING`,
    [items],
  );
  await db.exec(`INSERT INTO stores VALUES ('S1', 'R1'), ('S2', 'R2') ON CONFLICT DO NOTHING`);
  // An id with a comma and a quote exercises CSV quoting end to end.
  await db.exec(`INSERT INTO items VALUES ('item,"q"', 'D1', 'C1') ON CONFLICT DO NOTHING`);
  await db.query(
    `INSERT INTO series (item_id, store_id)
     SELECT i.item_id, s.store_id FROM items i CROSS JOIN stores s ORDER BY i.item_id = 'item,"q"' DESC, i.item_id DESC, s.store_id
     ON CONFLICT DO NOTHING`,
  );
  const mode = spec.mode ?? 'shift';
  const t = spec.table;
  await db.exec(`DROP TABLE IF EXISTS ${t}; CREATE TABLE ${t} (
    series_id int4 NOT NULL, day date NOT NULL, origin date, is_predict bool NOT NULL, label int4,
    lag_7 float8, mean_28 float8, price_ratio float8)`);
  // Values: doubles needing all 17 digits (correctly rounded divisions, the same on every
  // platform), NULLs, a NaN and an infinity.
  const origin = mode === 'origin' ? `$1::date - o` : 'NULL::date';
  const originRows = mode === 'origin' ? 'CROSS JOIN generate_series(0, 1) o' : '';
  await db.query(
    `INSERT INTO ${t}
     SELECT series_id, day, origin, is_predict, label, lag_7, mean_28, price_ratio FROM (
       SELECT s.series_id, $1::date + k AS day, ${origin} AS origin, k > 0 AS is_predict,
         CASE WHEN k > 0 THEN NULL ELSE (s.series_id * 7 + k + 1000) % 11 END AS label,
         CASE WHEN (s.series_id + k) % 13 = 0 THEN NULL ELSE ((s.series_id * 7919 + k * 104729) % 100003 - 50000)::float8 / 997 END AS lag_7,
         CASE WHEN s.series_id = 3 AND k = -1 THEN 'NaN'::float8 WHEN s.series_id = 3 AND k = -2 THEN '-Infinity'::float8
              ELSE ((k * 31 + s.series_id) % 1009)::float8 / (s.series_id + 0.5) END AS mean_28,
         CASE WHEN k % 5 = 0 THEN NULL ELSE 1 + k / 1e6 END AS price_ratio
       FROM (SELECT series_id FROM series ORDER BY series_id LIMIT $4) s
       CROSS JOIN generate_series(1 - $2::int, $3::int) k ${originRows}
     ) x ORDER BY ${spec.scramble ? "md5(series_id::text || day::text || coalesce(origin::text, ''))" : `series_id${mode === 'origin' ? ', origin' : ''}, day`}`,
    [spec.cutoff, spec.days, spec.horizon, spec.series],
  );
  const counts = (
    await db.query<{ n: number; p: number }>(
      `SELECT count(*)::int AS n, count(*) FILTER (WHERE is_predict)::int AS p FROM ${t}`,
    )
  ).rows[0]!;
  await db.query('DELETE FROM snapshots WHERE set_name = $1 AND cutoff = $2', [spec.set, spec.cutoff]);
  await db.query(
    `INSERT INTO snapshots (set_name, cutoff, definition_hash, data_fingerprint, table_name, mode, horizon, columns,
       row_count, train_rows, predict_rows, built_at, timings, train_from, fingerprint_parts, codes, definition)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, '2024-02-01T10:00:00Z', '{}', $2::date - $12::int + 1, '{}', '{}', '{}')`,
    [
      spec.set,
      spec.cutoff,
      `def-${spec.set}`,
      `data-${spec.table}`,
      t,
      mode,
      spec.horizon,
      JSON.stringify(FEATURES),
      counts.n,
      counts.n - counts.p,
      counts.p,
      spec.days,
    ],
  );
}
