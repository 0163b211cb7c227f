import { createHash } from 'node:crypto';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll } from 'vitest';
import { type Config, parseConfig } from '../../src/config/config.js';
import type { Db } from '../../src/db/database.js';
import { openDatabase } from '../../src/db/open.js';
import { databaseUrl } from './servers.js';

/** A schema name derived from the test file's path, so parallel files never share tables. */
export function schemaFor(metaUrl: string, suffix = ''): string {
  const hash = createHash('sha256')
    .update(fileURLToPath(metaUrl) + suffix)
    .digest('hex')
    .slice(0, 12);
  return `t_${hash}`;
}

export interface TestDb {
  readonly db: Db;
  readonly config: Config;
  readonly schema: string;
}

/** Gives the file its own migrated schema on the real server and drops it afterwards. */
export function useTestDb(metaUrl: string, overrides: Record<string, unknown> = {}): () => TestDb {
  let state: TestDb | undefined;
  const schema = schemaFor(metaUrl);
  beforeAll(async () => {
    const url = await databaseUrl();
    const config = parseConfig({ ...overrides, database: { url, schema } }, 'test');
    const admin = await openDatabase(config, { migrate: false, poolSize: 1 });
    await admin.exec(`DROP SCHEMA IF EXISTS "${schema}" CASCADE`);
    await admin.close();
    state = { db: await openDatabase(config), config, schema };
  });
  afterAll(async () => {
    if (!state) return;
    await state.db.exec(`DROP SCHEMA IF EXISTS "${schema}" CASCADE`);
    await state.db.close();
  });
  return () => {
    if (!state) throw new Error('test database not ready (beforeAll failed?)');
    return state;
  };
}
