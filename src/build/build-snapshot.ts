import { availableParallelism } from 'node:os';
import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import { type BuildOptions, type BuildRequest, planBuild } from './build-plan.js';
import { parseDay } from '../core/days.js';
import { type BuildPlan, planFeatureSet } from './build-plan.js';
import {
  buildPartition,
  type PartitionData,
  type PartitionResult,
  readPartition,
} from './build-partition.js';
import type { SalesChecksum } from './fingerprint.js';
import type { GroupMap } from './group-stage.js';
import { addGroupTotals, readChainPrices, readDepartments, type StorePrices } from './partition-input.js';
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
  const limit = Math.max(1, opts.concurrency ?? Math.min(db.parallelism, availableParallelism()));
  // Read every partition while the plan fingerprints the data, summing the chain-wide group
  // totals from the same reads: no separate pass over the sales, nothing staged. The chain
  // levels need every store before any series computes, so all inputs are held until then.
  const read = new Map<string, PartitionData>();
  const chainGroups: GroupMap = new Map();
  const alongside = async (draft: BuildPlan, sales: SalesChecksum | null) => {
    const set = planFeatureSet(draft);
    const groupFrom = parseDay(draft.groupFrom)!;
    const C = parseDay(draft.cutoff)!;
    const wantsPrices = set.families.some((f) => f.family.needs(f.params, set.shape).prices);
    // One scan of the prices for every store, started by the first lane before its partitions
    // (so no lane waits for it while holding the connection it would need); the others take
    // their store's share when their reads reach the prices.
    let chainPrices: Promise<Map<string, StorePrices>> | null = null;
    const first = wantsPrices
      ? async () => {
          chainPrices = db.session(async (s) =>
            readChainPrices(s, parseDay(draft.priceBoundary)!, await readDepartments(s)),
          );
          await chainPrices;
        }
      : null;
    const storePrices = async (store: string) =>
      (await chainPrices!).get(store) ?? { prices: new Map(), deptPrices: new Map() };
    await overPartitions(draft.partitions, limit, first, (p) =>
      db.session(async (s) => {
        await s.exec('SET jit = off');
        try {
          const data = await readPartition(s, draft, set, p, {
            chainGroups,
            ...(sales ? { salesChecksum: sales } : {}),
            ...(wantsPrices ? { storePrices } : {}),
          });
          addGroupTotals(chainGroups, data.series, draft.chainLevels, data.base, groupFrom, C);
          read.set(p, data);
        } finally {
          await s.exec('RESET jit');
        }
      }),
    );
  };
  const plan = await planBuild(db, config, req, { ...opts, alongside });
  const planMs = performance.now() - t0;
  try {
    const queue = [...plan.partitions];
    let done = 0;
    const t1 = performance.now();
    const worker = async () => {
      for (;;) {
        const p = queue.shift();
        if (p === undefined) return;
        const data = read.get(p);
        read.delete(p);
        const r = await buildPartition(db, config, plan, p, {
          allowUnsafe: plan.unsafe,
          ...(data ? { data } : {}),
        });
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

/** Runs `fn` over the partitions, `limit` at a time; the first lane runs `first` before. */
async function overPartitions(
  parts: readonly string[],
  limit: number,
  first: (() => Promise<void>) | null,
  fn: (p: string) => Promise<void>,
): Promise<void> {
  const queue = [...parts];
  await Promise.all(
    Array.from({ length: Math.max(1, Math.min(limit, parts.length)) }, async (_, lane) => {
      if (lane === 0 && first) await first();
      for (let p = queue.shift(); p !== undefined; p = queue.shift()) await fn(p);
    }),
  );
}
