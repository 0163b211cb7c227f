import { afterAll, expect, test } from 'vitest';
import { buildSnapshot } from '../../../src/build/build-snapshot.js';
import { parseConfig } from '../../../src/config/config.js';
import type { Db } from '../../../src/db/database.js';
import { migrate } from '../../../src/db/migrate.js';
import { openPgliteDatabase } from '../../../src/db/pglite-database.js';
import { useTestDb } from '../../helpers/db.js';
import { insertChain } from './chain-fixture.js';
import { snapshotCells } from './compare-cells.js';

const sets = [
  {
    name: 'both',
    horizon: 5,
    training: { days: 45 },
    stockoutMask: true,
    families: {
      lags: { days: [5, 12] },
      windows: [{ size: 10, shift: 5 }],
      calendar: { eventKinds: ['sporting'] },
      prices: {},
      encodings: [{ groups: ['item', 'store_department', 'region'], window: 21 }],
      hierarchy: [{ levels: ['store', 'item_region'], size: 7, stats: ['mean', 'max', 'ewm'] }],
    },
  },
];
const t = useTestDb(import.meta.url, { sets });
let embedded: Db | undefined;
afterAll(async () => {
  await embedded?.close();
});

test('the embedded database (PGlite, one connection) builds the same snapshot as the server', async () => {
  const { db, config } = t();
  const shape = { stores: 2, items: 6, start: '2023-01-01', days: 150 };
  await insertChain(db, shape);
  const server = await buildSnapshot(db, config, { set: 'both', cutoff: '2023-05-15' });

  embedded = await openPgliteDatabase(undefined, 'larder');
  await migrate(embedded);
  await insertChain(embedded, shape);
  const econfig = parseConfig({ sets }, 'test');
  const local = await buildSnapshot(embedded, econfig, { set: 'both', cutoff: '2023-05-15' });

  expect(local.dataFingerprint).toBe(server.dataFingerprint);
  expect(local.definitionHash).toBe(server.definitionHash);
  expect([local.rowCount, local.trainRows, local.predictRows]).toEqual([
    server.rowCount,
    server.trainRows,
    server.predictRows,
  ]);
  const a = await snapshotCells(db, server.tableName);
  const b = await snapshotCells(embedded, local.tableName);
  expect(b.size).toBe(a.size);
  for (const [key, row] of a) expect(b.get(key), key).toEqual(row);
});
