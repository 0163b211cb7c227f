import { type BuildPlan, planBuild } from '../../build/build-plan.js';
import { abortBuild, finishBuild } from '../../build/finish-build.js';
import { getSnapshot } from '../../build/snapshot-catalogue.js';
import { dropOrphanStockoutStates } from '../../build/stockout-states.js';
import { parseDay } from '../../core/days.js';
import { LarderError } from '../../db/errors.js';
import { recordSnapshotMark } from '../change-log.js';
import { prepareRefreshIndexes } from '../refresh-indexes.js';
import type { PlanNotes } from '../pipeline-stages.js';
import type { WorkKit } from '../partitioned-job.js';
import { runPartitioned } from '../partitioned-job.js';
import { closeJob, findJob } from '../work-queue.js';
import type { PipelineStep, StepEnv, StepResult } from '../pipeline-step.js';
import {
  abortRefresh,
  beginRefreshFinish,
  canRefresh,
  checkRefresh,
  createRefreshPlan,
  type EarlyFinish,
  finishRefresh,
  type RefreshBasis,
  type RefreshPlan,
} from '../incremental-refresh.js';
import { BUILD_PARTITION, REFRESH_PARTITION } from '../work-handlers.js';

/** A plan stored with an earlier attempt can be finished only if nothing was loaded since. */
async function stillValid(env: StepEnv, plan: BuildPlan): Promise<boolean> {
  const r = await env.db.query<{ n: number; last: number; open: boolean }>(
    `SELECT (SELECT count(*) FROM load_batches)::int8 AS n,
       (SELECT coalesce(max(batch_id), 0) FROM load_batches)::int8 AS last,
       EXISTS (SELECT 1 FROM snapshot_builds WHERE table_name = $1 AND finished_at IS NULL) AS open`,
    [plan.stagingTable],
  );
  const x = r.rows[0]!;
  return x.open && Number(x.n) === plan.loadMark.batches && Number(x.last) === plan.loadMark.lastBatch;
}

/**
 * The full build, split by partition (store) into work items: planned here, built by whichever
 * workers claim the items (this process's own claim loops and any `larder worker`), finished
 * here with the atomic swap. A resumed attempt takes up the stored plan and its finished items.
 */
export async function fullBuild(env: StepEnv, kit: WorkKit): Promise<StepResult> {
  const set = env.set!;
  const inputs = env.state.plans.get(set)!.inputs;
  const jobKey = `build:${set}:${env.cutoff}:${inputs.definitionHash}:${inputs.dataFingerprint}`;
  const t0 = performance.now();
  const run = await runPartitioned(env, kit, {
    kind: BUILD_PARTITION,
    jobKey,
    label: `build ${set}`,
    reuse: (p) => stillValid(env, p as BuildPlan),
    async create() {
      const plan = await planBuild(env.db, env.config, { set, cutoff: env.cutoff });
      if (plan.dataFingerprint !== inputs.dataFingerprint) {
        await abortBuild(env.db, plan).catch(() => {});
        throw new LarderError('DATA_CHANGED', `the data of ${set} changed after the run started: run again`);
      }
      // While the table is empty: the indexes a later refresh deletes by (refresh-indexes.ts).
      if (plan.definition.mode === 'shift' && env.config.pipeline.incremental)
        await prepareRefreshIndexes(env.db, plan.stagingTable, plan.from);
      return { payload: plan, partitions: plan.partitions };
    },
  });
  const plan = run.payload as BuildPlan;
  const buildMs = performance.now() - t0;
  try {
    const info = await finishBuild(env.db, env.config, plan, {
      runId: env.run.runId,
      jobId: run.jobId,
      partitionsMs: Math.round(buildMs),
    });
    await closeJob(env.db, run.jobId, 'done');
    // The next run's fingerprint and refresh decision start from this mark (change-log.ts).
    const planned = env.state.plans.get(set)!.plan as PlanNotes;
    await recordSnapshotMark(env.db, info.snapshotId, {
      mark: planned.changeMark,
      cutoff: parseDay(env.cutoff)!,
      priceBoundary: planned.priceBoundary,
    });
    await dropOrphanStockoutStates(env.db);
    return {
      status: 'succeeded',
      rows: info.rowCount,
      details: {
        mode: 'full',
        fingerprint: planned.fingerprint,
        snapshotId: info.snapshotId,
        table: info.tableName,
        partitions: run.progress.total,
        reclaimed: run.progress.reclaimed,
        resumedJob: run.resumed,
      },
      message:
        `snapshot ${info.snapshotId}: ${info.rowCount} rows over ${run.progress.total} partitions` +
        (run.progress.reclaimed ? ` (${run.progress.reclaimed} retried)` : ''),
    };
  } catch (err) {
    if (err instanceof LarderError && err.code === 'DATA_CHANGED')
      await abortBuild(env.db, plan).catch(() => {});
    throw err;
  }
}

/**
 * The incremental path: only the rows a new day can change are computed, by partition through the
 * work queue, then the previous snapshot is advanced in place (incremental-refresh.ts).
 */
async function refresh(
  env: StepEnv,
  kit: WorkKit,
  basis: RefreshBasis,
  checkMs: number,
): Promise<StepResult> {
  const set = env.set!;
  const inputs = env.state.plans.get(set)!.inputs;
  const t0 = performance.now();
  let planMs = 0;
  // The finish's deletes start with the partitions when the pool has a connection to spare for
  // them beside this process's claim loops (never on the embedded database's one connection).
  const early = env.db.kind === 'server' && env.db.parallelism >= env.settings.concurrency + 2;
  let begun: EarlyFinish | null = null;
  const run = await runPartitioned(env, kit, {
    kind: REFRESH_PARTITION,
    jobKey: `refresh:${set}:${env.cutoff}:${inputs.definitionHash}:${inputs.dataFingerprint}:${basis.previousSnapshotId}`,
    label: `refresh ${set}`,
    async reuse(p) {
      const plan = p as RefreshPlan;
      return (
        (
          await env.db.query<{ ok: boolean }>('SELECT to_regclass($1) IS NOT NULL AS ok', [
            plan.build.stagingTable,
          ])
        ).rows[0]!.ok && (await stillLoaded(env, plan.build))
      );
    },
    async create() {
      const tp = performance.now();
      const plan = await createRefreshPlan(env.db, env.config, basis);
      planMs = performance.now() - tp;
      if (early) begun = beginRefreshFinish(env.db, plan);
      return { payload: plan, partitions: plan.build.partitions };
    },
  }).catch(async (err) => {
    await begun?.abort();
    throw err;
  });
  const plan = run.payload as RefreshPlan;
  const partitionsMs = performance.now() - t0 - planMs;
  try {
    const tf = performance.now();
    const timings = {
      checkMs: Math.round(checkMs),
      planMs: Math.round(planMs),
      partitionsMs: Math.round(partitionsMs),
    };
    const notes = { runId: env.run.runId, jobId: run.jobId, ...timings };
    const r = begun ? await (begun as EarlyFinish).finish(notes) : await finishRefresh(env.db, plan, notes);
    await closeJob(env.db, run.jobId, 'done');
    await dropOrphanStockoutStates(env.db);
    const finishMs = Math.round(performance.now() - tf);
    return {
      status: 'succeeded',
      rows: r.rowCount,
      details: {
        mode: 'incremental',
        fingerprint: (env.state.plans.get(set)!.plan as PlanNotes).fingerprint,
        from: plan.previousCutoff,
        snapshotId: r.snapshotId,
        table: r.table,
        computedRows: r.computedRows,
        stockout: plan.stockout ?? null,
        salesFrom: plan.build.salesFrom,
        droppedRows: r.droppedRows,
        partitions: run.progress.total,
        timings: { ...timings, finishMs },
      },
      message:
        `snapshot ${r.snapshotId} refreshed from ${plan.previousCutoff}: ${r.computedRows} rows computed, ` +
        `${r.droppedRows} dropped, ${r.rowCount - r.computedRows} reused`,
    };
  } catch (err) {
    if (err instanceof LarderError && (err.code === 'DATA_CHANGED' || err.code === 'BUILD_GONE')) {
      await abortRefresh(env.db, plan).catch(() => {});
    }
    throw err;
  }
}

async function stillLoaded(env: StepEnv, plan: BuildPlan): Promise<boolean> {
  const r = await env.db.query<{ n: number; last: number }>(
    `SELECT (SELECT count(*) FROM load_batches)::int8 AS n, (SELECT coalesce(max(batch_id), 0) FROM load_batches)::int8 AS last`,
  );
  return (
    Number(r.rows[0]!.n) === plan.loadMark.batches && Number(r.rows[0]!.last) === plan.loadMark.lastBatch
  );
}

/**
 * The build step: skips a snapshot already built from the same inputs; refreshes incrementally
 * from the previous cutoff's snapshot when its definition and older data are unchanged
 * (`pipeline.incremental`, not with --force); else builds in full.
 */
export function buildStep(kit: WorkKit): PipelineStep {
  return {
    name: 'build',
    perSet: true,
    enabled: () => true,
    async run(env) {
      const set = env.set!;
      const inputs = env.state.plans.get(set)!.inputs;
      const current = await getSnapshot(env.db, set, env.cutoff);
      if (
        !env.settings.force &&
        current &&
        current.definitionHash === inputs.definitionHash &&
        current.dataFingerprint === inputs.dataFingerprint
      ) {
        // A process that finished the build but died before recording it left its job open.
        const open = await findJob(
          env.db,
          `build:${set}:${env.cutoff}:${inputs.definitionHash}:${inputs.dataFingerprint}`,
        );
        if (open?.status === 'open') await closeJob(env.db, open.jobId, 'done');
        // Same fingerprint now: the snapshot holds every change up to the run's mark.
        const planned = env.state.plans.get(set)!.plan as PlanNotes;
        await recordSnapshotMark(env.db, current.snapshotId, {
          mark: planned.changeMark,
          cutoff: parseDay(env.cutoff)!,
          priceBoundary: planned.priceBoundary,
        });
        return {
          status: 'succeeded',
          rows: current.rowCount,
          details: { mode: 'existing', snapshotId: current.snapshotId, table: current.tableName },
          message: `snapshot ${current.snapshotId} was already built from these inputs`,
        };
      }
      if (env.config.pipeline.incremental && !env.settings.force) {
        const tc = performance.now();
        const planned = env.state.plans.get(set)!.plan as PlanNotes;
        const basis = await checkRefresh(env.db, env.config, set, env.cutoff, {
          ...inputs,
          fingerprintParts: planned.fingerprintParts,
          changeMark: planned.changeMark,
        });
        if (canRefresh(basis)) return refresh(env, kit, basis, performance.now() - tc);
        env.reporter.info(`build ${set}: full build (${basis.reason})`, { set, reason: basis.reason });
      }
      return fullBuild(env, kit);
    },
  };
}
