import { type BuildPlan, planBuild } from '../../build/build-plan.js';
import { abortBuild, finishBuild } from '../../build/finish-build.js';
import { getSnapshot } from '../../build/snapshot-catalogue.js';
import { LarderError } from '../../db/errors.js';
import type { WorkKit } from '../partitioned-job.js';
import { runPartitioned } from '../partitioned-job.js';
import type { PipelineStep, StepEnv, StepResult } from '../pipeline-step.js';
import { BUILD_PARTITION } from '../work-handlers.js';

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
    return {
      status: 'succeeded',
      rows: info.rowCount,
      details: {
        mode: 'full',
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

/** The build step: skips a snapshot already built from the same inputs, else builds. */
export function buildStep(kit: WorkKit): PipelineStep {
  return {
    name: 'build',
    perSet: true,
    enabled: () => true,
    async run(env) {
      const set = env.set!;
      const inputs = env.state.plans.get(set)!.inputs;
      const snap = await getSnapshot(env.db, set, env.cutoff);
      if (
        !env.settings.force &&
        snap &&
        snap.definitionHash === inputs.definitionHash &&
        snap.dataFingerprint === inputs.dataFingerprint
      ) {
        return {
          status: 'succeeded',
          rows: snap.rowCount,
          details: { mode: 'existing', snapshotId: snap.snapshotId, table: snap.tableName },
          message: `snapshot ${snap.snapshotId} was already built from these inputs`,
        };
      }
      return fullBuild(env, kit);
    },
  };
}
