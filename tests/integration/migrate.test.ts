import { expect, test } from 'vitest';
import { listMigrations, migrate } from '../../src/db/migrate.js';
import { useTestDb } from '../helpers/db.js';
import { databaseUrl } from '../helpers/servers.js';

const t = useTestDb(import.meta.url);

test('migrations are applied once, in order, and a second run is a no-op', async () => {
  const { db } = t();
  const ids = listMigrations().map((m) => m.id);
  const rows = (await db.query<{ id: number }>('SELECT id FROM migrations ORDER BY id')).rows;
  expect(rows.map((r) => r.id)).toEqual(ids);
  expect(await migrate(db)).toEqual([]);
});

test('two migrators racing on a fresh schema both succeed and apply each file once', async () => {
  const { db } = t();
  const { openPgDatabase } = await import('../../src/db/pg-database.js');
  const url = await databaseUrl();
  const schema = `${db.schema}_race`;
  const a = openPgDatabase(url, schema, 1);
  const b = openPgDatabase(url, schema, 1);
  try {
    const [ra, rb] = await Promise.all([migrate(a), migrate(b)]);
    expect([...ra, ...rb].sort((x, y) => x - y)).toEqual(listMigrations().map((m) => m.id));
  } finally {
    await a.exec(`DROP SCHEMA "${schema}" CASCADE`);
    await a.close();
    await b.close();
  }
});
