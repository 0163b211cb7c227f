import { readdirSync, readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { type Db, quoteIdent } from './database.js';

export const SQL_DIR = join(dirname(fileURLToPath(import.meta.url)), '..', '..', 'sql');

export interface Migration {
  readonly id: number;
  readonly name: string;
  readonly sql: string;
}

/** The numbered files under `sql/`, in order. Files are never edited once released. */
export function listMigrations(dir = SQL_DIR): Migration[] {
  return readdirSync(dir)
    .filter((f) => /^\d{6}\.sql$/.test(f))
    .sort()
    .map((f) => ({ id: Number(f.slice(0, 6)), name: f, sql: readFileSync(join(dir, f), 'utf8') }));
}

/**
 * Applies pending migrations to the chain's schema. A session-level advisory lock keyed on the
 * schema serialises migrators across processes; each file runs in its own transaction, which
 * records the file first, so a second migrator that slipped past the lock collides on the
 * primary key and rolls back harmlessly.
 */
export async function migrate(db: Db, dir = SQL_DIR): Promise<number[]> {
  const schema = quoteIdent(db.schema);
  return db.session(async (s) => {
    await s.query('SELECT pg_advisory_lock(hashtext($1))', [`larder.migrate.${db.schema}`]);
    try {
      await s.exec(`CREATE SCHEMA IF NOT EXISTS ${schema};
        CREATE TABLE IF NOT EXISTS ${schema}.migrations (
          id int4 PRIMARY KEY, name text NOT NULL, applied_at timestamptz NOT NULL DEFAULT now());`);
      const done = new Set(
        (await s.query<{ id: number }>(`SELECT id FROM ${schema}.migrations`)).rows.map((r) => r.id),
      );
      const applied: number[] = [];
      for (const m of listMigrations(dir)) {
        if (done.has(m.id)) continue;
        await s.exec('BEGIN');
        try {
          await s.query(`INSERT INTO ${schema}.migrations (id, name) VALUES ($1, $2)`, [m.id, m.name]);
          await s.exec(`SET LOCAL search_path TO ${schema}, public;\n${m.sql}`);
          await s.exec('COMMIT');
        } catch (err) {
          await s.exec('ROLLBACK');
          throw new Error(`migration ${m.name} failed: ${(err as Error).message}`, { cause: err });
        }
        applied.push(m.id);
      }
      return applied;
    } finally {
      await s.query('SELECT pg_advisory_unlock(hashtext($1))', [`larder.migrate.${db.schema}`]);
    }
  });
}
