/**
 * The one small interface every stage talks to, so the same code runs on a PostgreSQL server
 * (node-postgres; COPY in through pg-copy-streams, COPY out through src/db/copy-out.ts) and on
 * the embedded PGlite (its own COPY via /dev/blob).
 */
export interface QueryResult<R> {
  readonly rows: R[];
  readonly rowCount: number;
}

export interface DbSession {
  query<R = Record<string, unknown>>(text: string, params?: readonly unknown[]): Promise<QueryResult<R>>;
  /** Runs a script of several statements with no parameters. */
  exec(text: string): Promise<void>;
  /**
   * `COPY ... FROM STDIN` fed from chunks. The statement must say `FROM STDIN`; the embedded
   * implementation rewrites it to its blob device. Returns the number of rows copied.
   */
  copyFrom(copySql: string, source: AsyncIterable<Uint8Array> | Iterable<Uint8Array>): Promise<number>;
  /** `COPY ... TO STDOUT` as a stream of chunks (chunk boundaries are arbitrary). */
  copyTo(copySql: string): AsyncIterable<Uint8Array>;
}

export interface Db extends DbSession {
  /** `server` when a PostgreSQL URL is configured, `embedded` for PGlite. */
  readonly kind: 'server' | 'embedded';
  /** The chain's schema; every connection has it first on its search_path. */
  readonly schema: string;
  /** One dedicated connection for the callback (temp tables, session locks). */
  session<T>(fn: (s: DbSession) => Promise<T>): Promise<T>;
  /** A transaction on one dedicated connection; rolled back if the callback throws. */
  transaction<T>(fn: (tx: DbSession) => Promise<T>): Promise<T>;
  /** How many sessions can usefully run at once (pool size; 1 for embedded). */
  readonly parallelism: number;
  close(): Promise<void>;
}

/** Quotes an identifier that has already been validated (see `safeIdent`). */
export function quoteIdent(name: string): string {
  return `"${name.replaceAll('"', '""')}"`;
}

const SAFE_IDENT = /^[a-z][a-z0-9_]{0,62}$/;

/** Identifiers from configuration must match `^[a-z][a-z0-9_]{0,62}$` before reaching SQL. */
export function safeIdent(name: string, what = 'identifier'): string {
  if (!SAFE_IDENT.test(name)) {
    throw new Error(`${what} '${name}' is not a safe SQL identifier (expected ^[a-z][a-z0-9_]{0,62}$)`);
  }
  return name;
}

export const SAFE_IDENT_PATTERN = SAFE_IDENT;
