import type { Db, DbSession } from '../db/database.js';
import { LarderError } from '../db/errors.js';

/** The text a (set, cutoff) lock is hashed from; the schema keeps chains in one database apart. */
export function runLockKey(schema: string, set: string, cutoff: string): string {
  return `larder.run:${schema}:${set}:${cutoff}`;
}

/** A backend holding one of the keys, as pg_locks and pg_stat_activity tell. */
export interface LockHolder {
  readonly key: string;
  readonly pid: number;
  readonly applicationName: string;
  readonly clientAddr: string | null;
  readonly backendStart: Date | null;
}

/** Raised when `--no-wait` finds a key taken; the message names who holds it. */
export class RunBusyError extends LarderError {
  readonly holders: readonly LockHolder[];
  constructor(message: string, holders: readonly LockHolder[]) {
    super('RUN_BUSY', message);
    this.name = 'RunBusyError';
    this.holders = holders;
  }
}

/** Raised inside a run whose lock session died: another process may now take the run. */
export class LockLostError extends LarderError {
  constructor(message: string, options?: { cause?: unknown }) {
    super('RUN_LOCK_LOST', message, options);
    this.name = 'LockLostError';
  }
}

/** Statement naming the backends holding the int8 advisory locks hashed from $1 (text[]). */
export const HOLDERS_SQL = `
  SELECT k.key, a.pid, a.application_name AS "applicationName", a.client_addr::text AS "clientAddr",
         a.backend_start AS "backendStart"
  FROM unnest($1::text[]) AS k(key)
  CROSS JOIN LATERAL (SELECT hashtextextended(k.key, 0) AS h) hk
  JOIN pg_locks l ON l.locktype = 'advisory' AND l.granted AND l.objsubid = 1
    AND l.database = (SELECT oid FROM pg_database WHERE datname = current_database())
    AND l.classid::int8 = ((hk.h >> 32) & 4294967295) AND l.objid::int8 = (hk.h & 4294967295)
  JOIN pg_stat_activity a ON a.pid = l.pid
  WHERE a.pid <> pg_backend_pid()`;

export async function lockHolders(db: DbSession, keys: readonly string[]): Promise<LockHolder[]> {
  return (await db.query<LockHolder>(HOLDERS_SQL, [[...keys]])).rows;
}

export interface LockOptions {
  /** false: give up at once with RunBusyError when a key is held (`--no-wait`). */
  readonly wait: boolean;
  /** Told who holds the keys before waiting for them. */
  readonly onWait?: (holders: readonly LockHolder[]) => void | Promise<void>;
  /** How often the lock session is probed while the callback runs (ms). */
  readonly probeMs?: number;
  /** Describes the holders for RunBusyError (e.g. with the run they are executing). */
  readonly describe?: (holders: readonly LockHolder[]) => Promise<string>;
}

/**
 * Runs `fn` holding session-level advisory locks on every key, on one dedicated connection that
 * does nothing else, so the locks live exactly as long as this process's hold on them: if the
 * process dies, the server drops the connection and the locks with it. Keys are taken in sorted
 * order, so two runs over overlapping sets cannot deadlock. While `fn` runs the session is
 * probed; if it dies (pg_terminate_backend, a restart), the signal passed to `fn` aborts with
 * LockLostError, because another process may now hold the same run. `verify` probes at once:
 * the runner calls it before recording any step as done.
 */
/** What the holder of run locks gets: a signal that aborts when they are lost, and a probe. */
export interface HeldLocks {
  readonly signal: AbortSignal;
  /** Asks the server now whether every lock is still held; throws LockLostError if not. */
  verify(): Promise<void>;
}

export async function withRunLocks<T>(
  lockDb: Db,
  keys: readonly string[],
  opts: LockOptions,
  fn: (held: HeldLocks) => Promise<T>,
): Promise<T> {
  const sorted = [...new Set(keys)].sort();
  return lockDb.session(async (s) => {
    const taken: string[] = [];
    const unlockAll = async () => {
      for (const k of taken.reverse()) {
        await s.query('SELECT pg_advisory_unlock(hashtextextended($1, 0))', [k]).catch(() => {});
      }
    };
    try {
      for (const key of sorted) {
        const got = (
          await s.query<{ ok: boolean }>('SELECT pg_try_advisory_lock(hashtextextended($1, 0)) AS ok', [key])
        ).rows[0]?.ok;
        if (got) {
          taken.push(key);
          continue;
        }
        const holders = await lockHolders(s, [key]);
        if (!opts.wait) {
          const who = opts.describe ? await opts.describe(holders) : describeHolders(holders);
          throw new RunBusyError(`${key.split(':').slice(2).join(' ')} is already running: ${who}`, holders);
        }
        await opts.onWait?.(holders);
        await s.query('SELECT pg_advisory_lock(hashtextextended($1, 0))', [key]);
        taken.push(key);
      }
    } catch (err) {
      await unlockAll();
      throw err;
    }

    const ac = new AbortController();
    const verify = async () => {
      if (ac.signal.aborted) throw ac.signal.reason;
      let n: number;
      try {
        n = (
          await s.query<{ n: number }>(
            `SELECT count(*)::int AS n FROM pg_locks WHERE pid = pg_backend_pid() AND locktype = 'advisory' AND granted`,
          )
        ).rows[0]!.n;
      } catch (err) {
        ac.abort(
          new LockLostError(`the run lock's connection was lost: ${(err as Error).message}`, { cause: err }),
        );
        throw ac.signal.reason;
      }
      if (n < taken.length) {
        ac.abort(new LockLostError('the run lock was released'));
        throw ac.signal.reason;
      }
    };
    const probe = setInterval(() => verify().catch(() => {}), opts.probeMs ?? 1000);
    try {
      return await fn({ signal: ac.signal, verify });
    } finally {
      clearInterval(probe);
      if (!ac.signal.aborted) await unlockAll();
    }
  });
}

export function describeHolders(holders: readonly LockHolder[]): string {
  if (holders.length === 0) return 'held by a process that has just let go (try again)';
  return holders
    .map(
      (h) =>
        `backend ${h.pid} '${h.applicationName}'${h.clientAddr ? ` from ${h.clientAddr}` : ''}` +
        (h.backendStart ? ` connected since ${h.backendStart.toISOString()}` : ''),
    )
    .join('; ');
}
