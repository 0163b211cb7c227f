import { Readable } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import pg from 'pg';
import { from as copyFromStream } from 'pg-copy-streams';
import { copyOut } from './copy-out.js';
import { type Db, type DbSession, type QueryResult, quoteIdent } from './database.js';
import { valueParsers } from './type-parsers.js';

const types = {
  getTypeParser(oid: number, format?: string) {
    const custom = valueParsers[oid];
    if (custom && format !== 'binary') return custom;
    return pg.types.getTypeParser(oid, format as 'text');
  },
};

function sessionOn(client: pg.PoolClient | pg.Client): DbSession {
  return {
    async query<R>(text: string, params?: readonly unknown[]): Promise<QueryResult<R>> {
      const res = await client.query(text, params as unknown[] | undefined);
      return { rows: res.rows as R[], rowCount: res.rowCount ?? 0 };
    },
    async exec(text: string) {
      await client.query(text);
    },
    async copyFrom(copySql, source) {
      const stream = client.query(copyFromStream(copySql));
      await pipeline(Readable.from(source, { objectMode: false }), stream);
      return Number(stream.rowCount ?? 0);
    },
    copyTo(copySql) {
      return (async function* () {
        const copy = copyOut(client, copySql);
        let finished = false;
        try {
          yield* copy.chunks;
          finished = true;
        } finally {
          // A consumer that stops early would leave this connection in COPY mode, and the next
          // statement on it would hang: read the rest before the session goes on.
          if (!finished) {
            try {
              await copy.drain();
            } catch {
              // the error the consumer already saw (or its own early exit) is the one that counts
            }
          }
        }
      })();
    },
  };
}

/** A PostgreSQL server through a pool; every connection starts with the chain's search_path. */
export function openPgDatabase(url: string, schema: string, poolSize = 4): Db {
  const pool = new pg.Pool({
    connectionString: url,
    max: poolSize,
    types,
    options: `-c search_path=${quoteIdent(schema)},public`,
    application_name: 'larder',
  });
  // An idle client that dies (server restart, pg_terminate_backend) must not crash the process.
  pool.on('error', () => {});
  const withClient = async <T>(fn: (c: pg.PoolClient) => Promise<T>): Promise<T> => {
    const client = await pool.connect();
    // A checked-out client whose backend dies (pg_terminate_backend, a restart) emits 'error';
    // the pool listens only on idle clients, so without this the process would crash instead of
    // seeing the failure as the rejection of the query in flight.
    client.on('error', ignoreError);
    let broken = false;
    try {
      return await fn(client);
    } catch (err) {
      broken = isConnectionLoss(err);
      throw err;
    } finally {
      client.off('error', ignoreError);
      client.release(broken);
    }
  };
  return {
    kind: 'server',
    schema,
    parallelism: poolSize,
    query: (text, params) => withClient((c) => sessionOn(c).query(text, params)),
    exec: (text) => withClient((c) => sessionOn(c).exec(text)),
    copyFrom: (sql, source) => withClient((c) => sessionOn(c).copyFrom(sql, source)),
    copyTo(sql) {
      return (async function* () {
        const client = await pool.connect();
        client.on('error', ignoreError);
        const copy = copyOut(client, sql);
        let finished = false;
        try {
          yield* copy.chunks;
          finished = true;
        } finally {
          // Stopped early, the discarded connection may still report errors: keep ignoring them.
          if (finished) client.off('error', ignoreError);
          // Stopped early, the connection is still mid-COPY: discard it rather than drain it.
          client.release(!finished);
        }
      })();
    },
    session: (fn) => withClient((c) => fn(sessionOn(c))),
    transaction: (fn) =>
      withClient(async (c) => {
        await c.query('BEGIN');
        try {
          const out = await fn(sessionOn(c));
          await c.query('COMMIT');
          return out;
        } catch (err) {
          await c.query('ROLLBACK').catch(() => {});
          throw err;
        }
      }),
    close: () => pool.end(),
  };
}

const ignoreError = () => {};

function isConnectionLoss(err: unknown): boolean {
  const code = (err as { code?: unknown } | null)?.code;
  return code === '57P01' || code === 'ECONNRESET' || code === 'EPIPE' || code === '08006';
}
