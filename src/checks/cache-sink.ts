import { formatDay, parseDay } from '../core/days.js';
import type { Db } from '../db/database.js';
import type { ChangeMark } from '../jobs/change-log.js';

/** A pass cache's state row: what it covers and the change-log mark it is valid from. */
export interface CacheState {
  readonly coveredTo: number;
  readonly last: number;
  readonly count: number;
}

/** What a pass may take from a cache, as planned before it reads. */
export interface CachePlan {
  /** Days (weeks, for prices) up to here come from the cache; null: read everything from the table. */
  readonly usable: number | null;
  /** Why the cache is not (wholly) usable, or null. */
  readonly reason: string | null;
  /** The change log before the plan was made: the mark of what this pass writes. */
  readonly mark: ChangeMark;
  /** The state as read, so a writer can tell another pass wrote in between. */
  readonly state: CacheState | null;
}

export interface CacheSpec {
  /** Advisory lock key of the cache (one writer at a time; another pass skips writing). */
  readonly lockKey: string;
  /** The one-row state table (covered_to, change_last, change_count, written_at). */
  readonly stateTable: 'sales_blocks_state' | 'price_history_state';
  /** The state the pass planned from: the write is skipped when another pass changed it since. */
  readonly state: CacheState | null;
  /** The change log before the pass: the mark of what it writes. */
  readonly mark: ChangeMark;
  /** Removes what the rows written replace. */
  readonly clear: readonly [string, readonly unknown[]];
  /** `COPY ... FROM STDIN (FORMAT binary)` of the rows. */
  readonly copySql: string;
}

/** Reads a cache's state row. */
export async function readCacheState(
  db: Pick<Db, 'query'>,
  table: CacheSpec['stateTable'],
): Promise<CacheState | null> {
  const r = (
    await db.query<{ covered_to: string; change_last: string; change_count: string }>(
      `SELECT covered_to, change_last, change_count FROM ${table}`,
    )
  ).rows[0];
  return r
    ? { coveredTo: parseDay(r.covered_to)!, last: Number(r.change_last), count: Number(r.change_count) }
    : null;
}

/**
 * Inside a write's transaction: takes the cache's lock (without waiting) and tells whether its
 * state is still the one the pass planned from. False: another pass holds the write or wrote since.
 */
export async function claimCache(
  tx: Pick<Db, 'query'>,
  lockKey: string,
  table: CacheSpec['stateTable'],
  planned: CacheState | null,
): Promise<boolean> {
  const got = await tx.query<{ ok: boolean }>('SELECT pg_try_advisory_xact_lock(hashtext($1)) AS ok', [
    lockKey,
  ]);
  if (!got.rows[0]!.ok) return false;
  const now = await readCacheState(tx, table);
  if (now === null || planned === null) return now === planned;
  return sameCacheState(now, planned);
}

/** Whether two states name the same copy: the same covered day and change-log mark. */
export const sameCacheState = (a: CacheState, b: CacheState): boolean =>
  a.coveredTo === b.coveredTo && a.last === b.last && a.count === b.count;

/** Records what a cache now covers and the change-log mark it is valid from. */
export async function writeCacheState(
  tx: Pick<Db, 'query'>,
  table: CacheSpec['stateTable'],
  coveredTo: number,
  mark: ChangeMark,
): Promise<void> {
  await tx.query(
    `INSERT INTO ${table} (covered_to, change_last, change_count) VALUES ($1, $2, $3)
     ON CONFLICT (only_row) DO UPDATE SET covered_to = EXCLUDED.covered_to,
       change_last = EXCLUDED.change_last, change_count = EXCLUDED.change_count, written_at = now()`,
    [formatDay(coveredTo), mark.last, mark.count],
  );
}

/** Async queue of chunks: the pass pushes, a COPY reads. */
class ChunkQueue {
  private readonly items: Uint8Array[] = [];
  private closed = false;
  private wake: (() => void) | null = null;

  push(chunks: readonly Uint8Array[]): void {
    if (chunks.length === 0) return;
    this.items.push(...chunks);
    this.wake?.();
  }

  close(): void {
    this.closed = true;
    this.wake?.();
  }

  async *drain(): AsyncGenerator<Uint8Array> {
    for (;;) {
      const next = this.items.shift();
      if (next) {
        yield next;
        continue;
      }
      if (this.closed) return;
      await new Promise<void>((res) => {
        this.wake = res;
      });
      this.wake = null;
    }
  }
}

/**
 * Writes the rows a pass encodes into its cache table and then the state, in one transaction.
 * On a server with connections to spare the COPY streams beside the pass; otherwise (embedded,
 * or a pool too small to hold a connection for the whole pass) the rows are kept and written
 * after it.
 */
export class CacheSink {
  private readonly queue = new ChunkQueue();
  private finishWith!: (coveredTo: number | null) => void;
  private readonly finished = new Promise<number | null>((res) => {
    this.finishWith = res;
  });
  private written: Promise<boolean> | null = null;

  constructor(
    private readonly db: Db,
    private readonly spec: CacheSpec,
  ) {
    // The pass itself and the other pass each hold a connection meanwhile.
    if (db.parallelism > 2) this.written = this.write();
  }

  push(chunks: readonly Uint8Array[]): void {
    this.queue.push(chunks);
  }

  /**
   * Ends the pass: with `coveredTo` (the newest day it read), commits the rows and the state;
   * with null, discards them. Resolves with whether they were stored (false also when another
   * pass changed the state meanwhile or holds the write).
   */
  finish(coveredTo: number | null): Promise<boolean> {
    this.queue.close();
    this.finishWith(coveredTo);
    this.written ??= coveredTo === null ? Promise.resolve(false) : this.write();
    return this.written;
  }

  private async write(): Promise<boolean> {
    const source = this.queue.drain();
    const aborted = new Error('cache not written');
    const s = this.spec;
    try {
      return await this.db.transaction(async (tx) => {
        if (!(await claimCache(tx, s.lockKey, s.stateTable, s.state))) {
          for await (const _ of source); // let the pass go on pushing into nothing
          return false;
        }
        await tx.query(s.clear[0], s.clear[1]);
        const [coveredTo] = await Promise.all([this.finished, tx.copyFrom(s.copySql, source)]);
        if (coveredTo === null) throw aborted;
        await writeCacheState(tx, s.stateTable, coveredTo, s.mark);
        return true;
      });
    } catch (err) {
      if (err === aborted) return false;
      throw err;
    }
  }
}
