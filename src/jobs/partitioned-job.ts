import { LarderError } from '../db/errors.js';
import type { StepEnv } from './pipeline-step.js';
import { runWorkers, type WorkHandler } from './worker.js';
import type { Waker } from './work-notifier.js';
import {
  closeJob,
  enqueueJob,
  failExhausted,
  findJob,
  type JobProgress,
  jobProgress,
  type NewJob,
  reopenJob,
} from './work-queue.js';

/** What the runner brings to a partitioned step: handlers for its own claim loops, a waker. */
export interface WorkKit {
  readonly handlers: ReadonlyMap<string, WorkHandler>;
  readonly waker: Waker;
  /** Claim name prefix of this process, `host:pid`. */
  readonly name: string;
}

export interface PartitionedRun {
  readonly jobId: number;
  /** The payload the items were built from: the stored one when an open job was resumed. */
  readonly payload: unknown;
  readonly resumed: boolean;
  readonly progress: JobProgress;
}

/**
 * Enqueues a job (or takes up the open or failed job with the same key, keeping its finished
 * items), works it with the runner's own claim loops beside any `larder worker` processes, and
 * waits until every item is done, reporting progress. A failed item (attempts used up) fails the
 * step with its error; the job is left `failed` and reopened by the next attempt.
 */
export interface PartitionedJob {
  readonly kind: string;
  /** Names the job's content: an unfinished job with the same key is taken up, not redone. */
  readonly jobKey: string;
  readonly label: string;
  /** Makes the payload and partitions of a new job (e.g. plans the build). */
  create(): Promise<{ payload: unknown; partitions: readonly string[] }>;
  /** Whether a stored payload can still be finished; false cancels that job and creates anew. */
  reuse?(payload: unknown): Promise<boolean>;
}

export async function runPartitioned(
  env: StepEnv,
  kit: WorkKit,
  job: PartitionedJob,
): Promise<PartitionedRun> {
  const opts = job;
  const { db, config, reporter } = env;
  const w = config.pipeline.workers;
  const existing = await findJob(db, job.jobKey);
  let resumed = false;
  if (existing && existing.status !== 'done') {
    const payload = (
      await db.query<{ payload: unknown }>('SELECT payload FROM work_jobs WHERE job_id = $1', [
        existing.jobId,
      ])
    ).rows[0]!.payload;
    if (!env.settings.force && (!opts.reuse || (await opts.reuse(payload)))) {
      if (existing.status !== 'open') await reopenJob(db, existing.jobId);
      resumed = true;
    } else if (existing.status === 'open') await closeJob(db, existing.jobId, 'cancelled');
  }
  let ref: { jobId: number; created: boolean };
  let payload: unknown;
  if (resumed) {
    ref = { jobId: existing!.jobId, created: false };
    payload = (
      await db.query<{ payload: unknown }>('SELECT payload FROM work_jobs WHERE job_id = $1', [ref.jobId])
    ).rows[0]!.payload;
  } else {
    const made = await job.create();
    payload = made.payload;
    const item: NewJob = {
      runId: env.run.runId,
      kind: job.kind,
      jobKey: job.jobKey,
      payload,
      partitions: made.partitions,
      leaseSeconds: w.timeoutSeconds,
      maxAttempts: w.maxAttempts,
    };
    ref = await enqueueJob(db, item);
  }
  await env.note({ jobId: ref.jobId });
  if (resumed) {
    const p = await jobProgress(db, ref.jobId);
    reporter.info(`${opts.label}: resuming job ${ref.jobId}, ${p.done}/${p.total} partitions already done`, {
      jobId: ref.jobId,
    });
  }

  const stop = new AbortController();
  const onLost = () => stop.abort();
  env.signal.addEventListener('abort', onLost, { once: true });
  const workers =
    env.settings.concurrency > 0
      ? runWorkers(db, config, kit.handlers, {
          concurrency: env.settings.concurrency,
          name: kit.name,
          filter: { jobId: ref.jobId },
          pollMs: w.pollSeconds * 1000,
          heartbeatMs: w.heartbeatSeconds * 1000,
          signal: stop.signal,
          waker: kit.waker,
          onEvent: (e) => {
            if (e.type === 'failed' || e.type === 'error') {
              reporter.warn(
                `${opts.label}: ${e.type === 'failed' ? `partition ${e.item.partition}` : 'worker'} ${e.code}: ${e.message}`,
              );
            } else if (e.type === 'lost')
              reporter.warn(`${opts.label}: partition ${e.item.partition} was reclaimed by another worker`);
            else if (e.type === 'done') kit.waker.wake();
          },
        })
      : Promise.resolve(null);
  const startedAt = Date.now();
  let progress: JobProgress;
  try {
    for (;;) {
      await failExhausted(db, ref.jobId);
      progress = await jobProgress(db, ref.jobId);
      reporter.progress({
        label: opts.label,
        done: progress.done,
        total: progress.total,
        rows: progress.rows,
        startedAt,
      });
      if (progress.failed > 0) {
        await closeJob(db, ref.jobId, 'failed');
        const e = progress.firstError;
        throw new LarderError(
          e?.code && e.code !== 'ERROR' ? e.code : 'PARTITION_FAILED',
          `partition ${e?.partition ?? '?'} failed after ${w.maxAttempts} attempt(s): ${e?.message ?? 'no message'}`,
        );
      }
      if (progress.done === progress.total) break;
      if (env.signal.aborted) throw env.signal.reason;
      await kit.waker.wait(w.pollSeconds * 1000, env.signal);
    }
  } finally {
    stop.abort();
    env.signal.removeEventListener('abort', onLost);
    await workers;
    reporter.endProgress();
  }
  return { jobId: ref.jobId, payload, resumed, progress };
}
