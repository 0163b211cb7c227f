import type { BuildPlan } from '../build/build-plan.js';
import { buildPartition } from '../build/build-partition.js';
import { type RefreshPlan, refreshPartition } from './incremental-refresh.js';
import type { WorkHandler } from './worker.js';
import type { JobProcess } from './runner-process.js';

/** Item kind of one partition of a snapshot build; the job payload is the build plan. */
export const BUILD_PARTITION = 'build-partition';

/**
 * Builds one partition of a planned snapshot. The plan carries the set's definition, so a worker
 * on another machine builds exactly what was planned whatever its own config says.
 */
export const buildPartitionHandler: WorkHandler = {
  kind: BUILD_PARTITION,
  async run({ db, config, item }) {
    const plan = item.payload as BuildPlan;
    const r = await buildPartition(db, config, plan, item.partition, { allowUnsafe: plan.unsafe });
    return { rows: r.rowCount };
  },
};

/** Item kind of one partition of an incremental refresh; the payload is the refresh plan. */
export const REFRESH_PARTITION = 'refresh-partition';

/** Computes the rows a new day changes for one partition (see incremental-refresh.ts). */
export const refreshPartitionHandler: WorkHandler = {
  kind: REFRESH_PARTITION,
  async run({ db, item }) {
    return { rows: await refreshPartition(db, item.payload as RefreshPlan, item.partition) };
  },
};

/** The kinds of work `larder worker` and the runner's own claim loops do. */
export const WORK_HANDLERS: ReadonlyMap<string, WorkHandler> = new Map([
  [buildPartitionHandler.kind, buildPartitionHandler],
  [refreshPartitionHandler.kind, refreshPartitionHandler],
]);

/** What the pipeline's partitioned steps need from a job process: handlers, wake-ups, a name. */
export function workKit(proc: Pick<JobProcess, 'waker' | 'holder'>) {
  return { handlers: WORK_HANDLERS, waker: proc.waker, name: `${proc.holder.host}:${proc.holder.pid}` };
}
