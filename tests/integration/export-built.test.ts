import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { DuckDBInstance } from '@duckdb/node-api';
import { beforeAll, expect, test } from 'vitest';
import { buildSnapshot } from '../../src/build/build-snapshot.js';
import { scoreForecasts } from '../../src/eval/score-forecasts.js';
import { exportSnapshot } from '../../src/export/export-snapshot.js';
import { openSnapshot, type SnapshotRow } from '../../src/export/open-snapshot.js';
import { useTestDb } from '../helpers/db.js';
import { insertChain } from './build/chain-fixture.js';

// A real snapshot from the feature build, exported and read back; then the modeler's loop:
// read the prediction rows, forecast, score.
const t = useTestDb(import.meta.url, {
  sets: [
    {
      name: 'weekly',
      horizon: 7,
      training: { days: 60 },
      families: {
        lags: { days: [7, 14] },
        windows: [{ size: 7, shift: 7, stats: ['mean', 'std'] }],
        calendar: {},
        prices: {},
      },
    },
  ],
});
const dir = mkdtempSync(join(tmpdir(), 'larder-export-built-'));
const CUTOFF = '2023-07-01';
let table = '';
let features: string[] = [];

beforeAll(async () => {
  const { db, config } = t();
  await insertChain(db, { stores: 3, items: 6, start: '2023-01-01', days: 200 });
  const info = await buildSnapshot(db, config, { set: 'weekly', cutoff: CUTOFF });
  table = info.tableName;
  features = info.columns.map((c) => c.name);
});

test('a built snapshot round-trips through Parquet and DuckDB, cell for cell', async () => {
  const { db, config } = t();
  const out = join(dir, 'weekly.parquet');
  const r = await exportSnapshot(db, config, { set: 'weekly', cutoff: CUTOFF, out });
  const cols = features.map((f) => `"${f}"`).join(', ');
  const pg = await db.query<Record<string, unknown>>(
    `SELECT s.item_id, s.store_id, x.day::text AS day, x.is_predict, x.label, ${features.map((f) => `x."${f}"`).join(', ')}
     FROM "${table}" x JOIN series s USING (series_id) ORDER BY x.series_id, x.day`,
  );
  expect(r.rowCount).toBe(pg.rows.length);
  const duck = await (await DuckDBInstance.create(':memory:')).connect();
  const got = await duck.runAndReadAll(
    `SELECT item_id, store_id, strftime(day, '%Y-%m-%d'), is_predict, label, ${cols} FROM read_parquet('${out}')`,
  );
  duck.closeSync();
  const rows = got.getRows();
  for (let i = 0; i < pg.rows.length; i++) {
    const want = Object.values(pg.rows[i]!);
    const have = rows[i]!.map((v) => (typeof v === 'bigint' ? Number(v) : v));
    if (JSON.stringify(have) !== JSON.stringify(want)) expect(have, `row ${i}`).toEqual(want);
  }
  const m = JSON.parse(readFileSync(r.manifestPath, 'utf8'));
  expect(m.columns.slice(5).map((c: { name: string }) => c.name)).toEqual(features);
  expect(m.columns.slice(5).every((c: { description: string }) => c.description.length > 0)).toBe(true);
});

test('openSnapshot yields Arrow batches and plain rows with the manifest; stopping early is safe', async () => {
  const { db } = t();
  const opened = await openSnapshot({ set: 'weekly', cutoff: CUTOFF, db, rows: 'predict' });
  expect(opened.manifest).toMatchObject({ set: 'weekly', cutoff: CUTOFF, horizon: 7, rows: 'predict' });
  let n = 0;
  for await (const batch of opened) {
    n += batch.numRows;
    expect(batch.schema.fields.map((f) => f.name).slice(0, 5)).toEqual([
      'item_id',
      'store_id',
      'day',
      'is_predict',
      'label',
    ]);
  }
  expect(n).toBe(18 * 7);
  const rows = await openSnapshot({ set: 'weekly', cutoff: CUTOFF, db, as: 'rows' });
  let first: SnapshotRow | undefined;
  for await (const row of rows) {
    first = row;
    break; // leaving mid-stream cancels the read and leaves the pool usable
  }
  expect(first).toMatchObject({
    item_id: expect.any(String),
    store_id: expect.any(String),
    is_predict: false,
  });
  expect(typeof first!.day).toBe('string');
  expect((await db.query<{ n: number }>('SELECT count(*)::int AS n FROM series')).rows[0]!.n).toBe(18);
});

test('the modeler loop: prediction rows -> forecasts file -> score beside the references', async () => {
  const { db, config } = t();
  const lag = features.find((f) => f.startsWith('lag') && f.includes('7')) ?? features[0]!;
  const lines = ['item_id,store_id,day,value'];
  for await (const row of await openSnapshot({
    set: 'weekly',
    cutoff: CUTOFF,
    db,
    as: 'rows',
    rows: 'predict',
  })) {
    lines.push(`${row.item_id},${row.store_id},${row.day},${Math.max(0, Number(row[lag] ?? 0))}`);
  }
  const file = join(dir, 'lag7.csv');
  writeFileSync(file, `${lines.join('\n')}\n`);
  const r = await scoreForecasts(db, config, { cutoff: CUTOFF, forecastsPath: file, set: 'weekly' });
  expect(r.horizon).toBe(7);
  expect(r.sources.map((s) => s.source)).toEqual(['lag7.csv', 'naive', 'seasonal_naive']);
  for (const s of r.sources) {
    expect(Number.isFinite(s.wrmsse)).toBe(true);
    expect(s.levels).toHaveLength(12);
  }
});
