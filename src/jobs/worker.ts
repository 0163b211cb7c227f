import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import { LarderError, sqlState } from '../db/errors.js';
import type { Waker } from './work-notifier.js';
import {
  type ClaimedItem,
  type ClaimFilter,
  claimItem,
  completeItem,
  failItem,
  heartbeat,
  releaseItem,
} from './work-queue.js';

/** What a handler gets for one item. */
export interface WorkContext {
  readonly db: Db;
  readonly config: Config;
  readonly item: ClaimedItem;
  /** Aborts when the claim was lost (another worker reclaimed the item): stop, do not finish. */
  readonly signal: AbortSignal;
}

/** Does one kind of work item (e.g. one partition of a build). Must be idempotent per item. */
export interface WorkHandler {
  readonly kind: string;
  run(ctx: WorkContext): Promise<{ readonly rows: number }>;
}

export type WorkerEvent =
  | { readonly type: 'claimed'; readonly worker: string; readonly item: ClaimedItem }
  | {
      readonly type: 'done';
      readonly worker: string;
      readonly item: ClaimedItem;
      readonly rows: number;
      readonly ms: number;
    }
  | {
      readonly type: 'failed';
      readonly worker: string;
      readonly item: ClaimedItem;
      readonly code: string;
      readonly message: string;
    }
  | { readonly type: 'lost'; readonly worker: string; readonly item: ClaimedItem }
  | { readonly type: 'error'; readonly worker: string; readonly code: string; readonly message: string };

export interface WorkerOptions {
  readonly concurrency: number;
  /** Prefix of every slot's claim name, e.g. `host:pid`; slots add `/1`, `/2`, ... */
  readonly name: string;
  readonly filter?: ClaimFilter;
  readonly pollMs: number;
  readonly heartbeatMs: number;
  /** Stops claiming; items in hand are finished first. */
  readonly signal: AbortSignal;
  /** Asked when the queue has nothing to claim: true ends the slot (the runner's own workers). */
  readonly idleExit?: () => Promise<boolean> | boolean;
  readonly waker?: Waker;
  readonly onEvent?: (e: WorkerEvent) => void;
}

export interface WorkerStats {
  readonly done: number;
  readonly failed: number;
  readonly lost: number;
  readonly rows: number;
}

/** A stable code for any failure: a LarderError's code, a SQLSTATE, or ERROR. */
export function errorCode(err: unknown): string {
  if (err instanceof LarderError) return err.code;
  return sqlState(err) ?? 'ERROR';
}

/**
 * Runs `concurrency` claim loops against the queue until `signal` aborts (or `idleExit` says so).
 * Each item is worked under a session advisory lock on the item, so even a worker that was only
 * presumed dead (it stopped heartbeating but still runs) never works the same item at the same
 * time as the one that reclaimed it; the claim's attempt number fences the final write.
 */
export async function runWorkers(
  db: Db,
  config: Config,
  handlers: ReadonlyMap<string, WorkHandler>,
  opts: WorkerOptions,
): Promise<WorkerStats> {
  const stats = { done: 0, failed: 0, lost: 0, rows: 0 };
  const filter: ClaimFilter = {
    kinds: opts.filter?.kinds ?? [...handlers.keys()],
    jobId: opts.filter?.jobId,
  };
  const slot = async (n: number) => {
    const me = `${opts.name}/${n}`;
    while (!opts.signal.aborted) {
      let item: ClaimedItem | undefined;
      try {
        item = await claimItem(db, me, filter);
      } catch (err) {
        if (opts.signal.aborted) break;
        // A lost connection while claiming is retried after a pause; the pool reconnects.
        opts.onEvent?.({
          type: 'error',
          worker: me,
          code: errorCode(err),
          message: `claim: ${(err as Error).message}`,
        });
        await sleep(opts, opts.pollMs);
        continue;
      }
      if (!item) {
        if (opts.idleExit && (await opts.idleExit())) break;
        await sleep(opts, opts.pollMs);
        continue;
      }
      opts.onEvent?.({ type: 'claimed', worker: me, item });
      const outcome = await workItem(db, config, handlers, item, me, opts);
      if (outcome.kind === 'done') {
        stats.done++;
        stats.rows += outcome.rows;
      } else if (outcome.kind === 'failed') stats.failed++;
      else stats.lost++;
    }
  };
  await Promise.all(Array.from({ length: opts.concurrency }, (_, i) => slot(i + 1)));
  return stats;
}

type Outcome = { kind: 'done'; rows: number } | { kind: 'failed' } | { kind: 'lost' };

async function workItem(
  db: Db,
  config: Config,
  handlers: ReadonlyMap<string, WorkHandler>,
  item: ClaimedItem,
  me: string,
  opts: WorkerOptions,
): Promise<Outcome> {
  const handler = handlers.get(item.kind);
  if (!handler) {
    // Claims are filtered by kind, so this is a programming error; give the item back.
    await releaseItem(db, item, me);
    return { kind: 'lost' };
  }
  const claim = new AbortController();
  const beat = setInterval(() => {
    heartbeat(db, item, me).then(
      (ours) => {
        if (!ours)
          claim.abort(new LarderError('CLAIM_LOST', `item ${item.itemId} was reclaimed by another worker`));
      },
      () => {}, // a missed beat is retried at the next tick; the lease allows for several
    );
  }, opts.heartbeatMs);
  const t0 = performance.now();
  const lockKey = `larder.item:${db.schema}:${item.itemId}`;
  try {
    return await db.session(async (s) => {
      await s.query('SELECT pg_advisory_lock(hashtextextended($1, 0))', [lockKey]);
      try {
        if (claim.signal.aborted) return lost(item, me, opts);
        let rows: number;
        try {
          ({ rows } = await handler.run({ db, config, item, signal: claim.signal }));
        } catch (err) {
          if (claim.signal.aborted) return lost(item, me, opts);
          const code = errorCode(err);
          const message = (err as Error)?.message ?? String(err);
          await failItem(db, item, me, { code, message }).catch(() => {});
          opts.onEvent?.({ type: 'failed', worker: me, item, code, message });
          return { kind: 'failed' } as const;
        }
        const ms = performance.now() - t0;
        if (!(await completeItem(db, item, me, { rows, durationMs: ms }))) return lost(item, me, opts);
        opts.onEvent?.({ type: 'done', worker: me, item, rows, ms });
        return { kind: 'done', rows } as const;
      } finally {
        await s.query('SELECT pg_advisory_unlock(hashtextextended($1, 0))', [lockKey]).catch(() => {});
      }
    });
  } catch (err) {
    // The lock session itself failed (connection lost): the claim lapses and is reclaimed.
    const code = errorCode(err);
    opts.onEvent?.({ type: 'failed', worker: me, item, code, message: (err as Error).message });
    await failItem(db, item, me, { code, message: (err as Error).message }).catch(() => {});
    return { kind: 'failed' };
  } finally {
    clearInterval(beat);
  }
}

function lost(item: ClaimedItem, me: string, opts: WorkerOptions): Outcome {
  opts.onEvent?.({ type: 'lost', worker: me, item });
  return { kind: 'lost' };
}

function sleep(opts: WorkerOptions, ms: number): Promise<void> {
  if (opts.waker) return opts.waker.wait(ms, opts.signal);
  if (opts.signal.aborted) return Promise.resolve();
  return new Promise((resolve) => {
    const done = () => {
      clearTimeout(t);
      opts.signal.removeEventListener('abort', done);
      resolve();
    };
    const t = setTimeout(done, ms);
    opts.signal.addEventListener('abort', done, { once: true });
  });
}
