import { afterAll, beforeAll, expect, test } from 'vitest';
import type { Db } from '../../src/db/database.js';
import { migrate } from '../../src/db/migrate.js';
import { openPgliteDatabase } from '../../src/db/pglite-database.js';
import { type LoadRequest, loadFiles } from '../../src/load/load-files.js';
import { useTestDb } from '../helpers/db.js';
import { BASE, days, dump, RAW_TABLES, salesWide, useTempDir } from './load-helpers.js';

// The same files through the embedded PostgreSQL (PGlite, its /dev/blob COPY) and through the
// server (pg-copy-streams) must give identical tables, rejects and batch records.

const server = useTestDb(import.meta.url);
const file = useTempDir('larder-embedded-');
let embedded: Db;

beforeAll(async () => {
  embedded = await openPgliteDatabase(undefined, 'larder');
  await migrate(embedded);
});
afterAll(async () => {
  await embedded?.close();
});

async function state(db: Db) {
  const tables: Record<string, string[]> = {};
  for (const t of RAW_TABLES) tables[t] = await dump(db, t as 'sales');
  const batches = await db.query(
    'SELECT target, mode, layout, status, rows_read, rows_stored, rows_rejected, first_day, last_day, message FROM load_batches ORDER BY batch_id',
  );
  const rejects = await db.query(
    'SELECT batch_id, line, other_line, reason, raw, key FROM rejected_rows ORDER BY batch_id, line',
  );
  return { tables, batches: batches.rows, rejects: rejects.rows };
}

test('embedded and server modes produce identical tables from the same files', async () => {
  const { db, config } = server();
  const base = Object.fromEntries(Object.entries(BASE).map(([k, v]) => [k, file(`base-${k}.csv`, v)]));
  const steps: LoadRequest[] = [
    { files: base },
    { files: { sales: file('wide.csv', salesWide(['I1', 'I3'], ['S1', 'S3'], days('2024-03-05', 30))) } },
    // A rejected batch: an impossible day and a stored key.
    {
      files: {
        sales: file('bad.csv', 'item_id,store_id,day,units\nI1,S1,2023-02-29,1\nI1,S1,2024-02-24,2\n'),
      },
    },
    {
      files: {
        sales: file('dups.csv', 'item_id,store_id,day,units\nI2,S3,2024-05-01,1\nI2,S3,2024-05-01,2\n'),
      },
      maxRejects: 1,
    },
    {
      files: { prices: file('fix.csv', 'item_id,store_id,week_start,price\nI1,S1,2024-03-02,2.1\n') },
      mode: 'replace',
    },
  ];
  for (const req of steps) {
    // Small COPY segments in both modes exercise the embedded path's cut into several COPYs.
    const a = await loadFiles(db, config, req, { segmentBytes: 2048 });
    const b = await loadFiles(embedded, config, req, { segmentBytes: 2048 });
    expect(b.batches.map(({ seconds: _s, ...x }) => x)).toEqual(a.batches.map(({ seconds: _s, ...x }) => x));
  }
  const s = await state(db);
  expect(s.tables.sales!.length).toBe(40 + 120 + 1);
  expect(await state(embedded)).toEqual(s);
});
