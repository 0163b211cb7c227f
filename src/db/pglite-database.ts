import { mkdirSync } from 'node:fs';
import { PGlite, type Transaction } from '@electric-sql/pglite';
import { type Db, type DbSession, type QueryResult, quoteIdent } from './database.js';
import { valueParsers } from './type-parsers.js';

type Conn = PGlite | Transaction;

// PGlite has no COPY protocol over a socket; its COPY reads and writes the virtual /dev/blob.
const toBlobIn = (sql: string) => sql.replace(/\bFROM\s+STDIN\b/i, "FROM '/dev/blob'");
const toBlobOut = (sql: string) => sql.replace(/\bTO\s+STDOUT\b/i, "TO '/dev/blob'");

function sessionOn(conn: Conn): DbSession {
  return {
    async query<R>(text: string, params?: readonly unknown[]): Promise<QueryResult<R>> {
      const res = await conn.query<R>(text, params as unknown[] | undefined);
      return { rows: res.rows, rowCount: res.affectedRows ?? res.rows.length };
    },
    async exec(text: string) {
      await conn.exec(text);
    },
    async copyFrom(copySql, source) {
      // The embedded database lives in this process's memory anyway, so one blob per COPY is the
      // price of PGlite's file-based COPY; the server path streams.
      const parts: Uint8Array[] = [];
      for await (const chunk of source) parts.push(chunk);
      const res = await conn.query(toBlobIn(copySql), [], { blob: new Blob(parts) });
      return res.affectedRows ?? 0;
    },
    copyTo(copySql) {
      return (async function* () {
        const res = await conn.query(toBlobOut(copySql));
        if (res.blob) yield new Uint8Array(await res.blob.arrayBuffer());
      })();
    },
  };
}

/** Opens (creating when absent) the embedded PostgreSQL kept in `dataDir`. */
export async function openPgliteDatabase(dataDir: string | undefined, schema: string): Promise<Db> {
  if (dataDir) mkdirSync(dataDir, { recursive: true });
  const pg = await PGlite.create(dataDir, { parsers: valueParsers });
  await pg.exec(`SET search_path TO ${quoteIdent(schema)}, public`);
  const top = sessionOn(pg);
  return {
    kind: 'embedded',
    schema,
    parallelism: 1,
    ...top,
    session: (fn) => fn(top),
    transaction: (fn) => pg.transaction((tx) => fn(sessionOn(tx))),
    close: () => pg.close(),
  };
}
