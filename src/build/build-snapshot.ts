import { availableParallelism } from 'node:os';
import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import { type BuildOptions, type BuildRequest, planBuild } from './build-plan.js';
import { buildPartition, type PartitionResult } from './build-partition.js';
import { abortBuild, finishBuild } from './finish-build.js';
import type { SnapshotInfo } from './snapshot-catalogue.js';

export interface SnapshotBuildOptions extends BuildOptions {
  /** Partitions built at once; default min(db.parallelism, core count). */
  readonly concurrency?: number;
  /** Called as each partition finishes (progress output). */
  readonly onPartition?: (r: PartitionResult, done: number, total: number) => void;
}

/**
 * Builds a snapshot in one call: plan, every partition (in parallel up to the core count, each
 * on its own connection), finish. A failure abandons the staging tables; the old snapshot, if
 * any, stays in place untouched.
 */
export async function buildSnapshot(
  db: Db,
  config: Config,
  req: BuildRequest,
  opts: SnapshotBuildOptions = {},
): Promise<SnapshotInfo> {
  const t0 = performance.now();
  const plan = await planBuild(db, config, req, opts);
  const planMs = performance.now() - t0;
  try {
    const limit = Math.max(1, opts.concurrency ?? Math.min(db.parallelism, availableParallelism()));
    const queue = [...plan.partitions];
    let done = 0;
    const t1 = performance.now();
    const worker = async () => {
      for (;;) {
        const p = queue.shift();
        if (p === undefined) return;
        const r = await buildPartition(db, config, plan, p, { allowUnsafe: plan.unsafe });
        done++;
        opts.onPartition?.(r, done, plan.partitions.length);
      }
    };
    await Promise.all(Array.from({ length: Math.min(limit, Math.max(1, queue.length)) }, worker));
    const partitionsMs = performance.now() - t1;
    const t2 = performance.now();
    const info = await finishBuild(db, config, plan, {
      planMs: Math.round(planMs),
      plan: plan.timings,
      partitionsMs: Math.round(partitionsMs),
      concurrency: limit,
    });
    return {
      ...info,
      timings: {
        ...info.timings,
        finishMs: Math.round(performance.now() - t2),
        totalMs: Math.round(performance.now() - t0),
      },
    };
  } catch (err) {
    await abortBuild(db, plan).catch(() => {});
    throw err;
  }
}
