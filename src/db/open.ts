import { resolve } from 'node:path';
import type { Config } from '../config/config.js';
import type { Db } from './database.js';
import { migrate } from './migrate.js';
import { openPgDatabase } from './pg-database.js';

export interface OpenOptions {
  /** Apply pending migrations (default true): every command that needs the schema gets it. */
  readonly migrate?: boolean;
  /** Override the configured schema (the audit's scratch schema, tests). */
  readonly schema?: string;
  readonly poolSize?: number;
}

/** The configured PostgreSQL when a URL is set; otherwise the embedded one under `.larder/`. */
export async function openDatabase(config: Config, opts: OpenOptions = {}): Promise<Db> {
  const schema = opts.schema ?? config.database.schema;
  const db = config.database.url
    ? openPgDatabase(config.database.url, schema, opts.poolSize ?? config.database.poolSize)
    : // Loaded only when used: a process against a server never needs the embedded engine.
      await (await import('./pglite-database.js')).openPgliteDatabase(
        resolve(config.database.embeddedDir),
        schema,
      );
  if (opts.migrate ?? true) {
    try {
      await migrate(db);
    } catch (err) {
      await db.close();
      throw err;
    }
  }
  return db;
}
