import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import { day, formatDay } from '../core/days.js';
import type {
  LoadOutcome,
  PipelineStages,
  PipelineStep,
  PlannedSet,
  RunState,
  StepEnv,
} from './pipeline-step.js';
import type { Reporter } from './progress.js';
import { latestSalesDay, resolveCutoffSpec } from './resolve-cutoff.js';
import { describeHolders, type HeldLocks, type LockHolder, runLockKey, withRunLocks } from './run-lock.js';
import {
  abandonStaleRuns,
  createRun,
  finishRun,
  finishStep,
  lastCompletedFor,
  latestRunFor,
  listRuns,
  listSteps,
  noteStep,
  type RunHolder,
  type RunRecord,
  type RunStatus,
  resumeRun,
  type SetInputs,
  type StepRecord,
  startStep,
} from './run-store.js';
import { errorCode } from './worker.js';

export interface RunRequest {
  /** `latest`, `yesterday`, `today` or a day. */
  readonly cutoff: string;
  /** Sets to refresh (default: `pipeline.sets`, else every configured set). */
  readonly sets?: readonly string[] | undefined;
  readonly force: boolean;
  /** false: exit at once when another process holds one of the (set, cutoff) locks. */
  readonly wait: boolean;
  /** `cli` or `schedule:<name>`. */
  readonly trigger: string;
  readonly scheduledFor?: Date | undefined;
  /** The clock `yesterday` and `today` are read on (a schedule's fire time). */
  readonly now?: Date | undefined;
  readonly timeZone?: string | undefined;
  readonly concurrency: number;
  readonly scheduled: boolean;
  /** Aborted by SIGTERM: the current step finishes, the run is recorded `interrupted`. */
  readonly stop?: AbortSignal | undefined;
}

export interface RunOutcome {
  readonly runId: number | null;
  readonly status: RunStatus;
  readonly cutoff: string | null;
  readonly sets: readonly string[];
  readonly resumed: boolean;
  readonly message: string;
}

export interface RunnerContext {
  readonly db: Db;
  /** A one-connection database handle that only holds the run locks. */
  readonly lockDb: Db;
  readonly config: Config;
  readonly reporter: Reporter;
  readonly holder: RunHolder;
  readonly stages: PipelineStages;
}

/** The sets a run covers: those asked for, else `pipeline.sets`, else every configured set. */
export function runSets(config: Config, all: readonly string[], asked?: readonly string[]): string[] {
  const chosen = asked?.length ? asked : (config.pipeline.sets ?? all);
  const unknown = chosen.filter((s) => !all.includes(s));
  if (unknown.length) {
    throw new UsageError(
      `unknown feature set${unknown.length > 1 ? 's' : ''} ${unknown.map((s) => `'${s}'`).join(', ')}` +
        ` (configured: ${all.length ? all.join(', ') : 'none'})`,
    );
  }
  if (chosen.length === 0) throw new UsageError('no feature sets are configured: add one under `sets`');
  return [...new Set(chosen)].sort();
}

/** Inputs compared key by key (JSON of sorted keys), for "same inputs as last time". */
export function sameInputs(
  a: Readonly<Record<string, SetInputs>>,
  b: Readonly<Record<string, SetInputs>>,
): boolean {
  const norm = (x: Readonly<Record<string, SetInputs>>) =>
    JSON.stringify(
      Object.keys(x)
        .sort()
        .map((k) => [k, x[k]!.definitionHash, x[k]!.dataFingerprint]),
    );
  return norm(a) === norm(b);
}

interface Planned {
  readonly seq: number;
  readonly step: PipelineStep;
  readonly set: string | null;
}

/** The steps of a run in order: the shared ones (check) first, then each set's steps. */
export function stepSequence(
  config: Config,
  steps: readonly PipelineStep[],
  sets: readonly string[],
): Planned[] {
  const on = steps.filter((s) => s.enabled(config));
  const out: Planned[] = [];
  for (const step of on.filter((s) => !s.perSet)) out.push({ seq: out.length + 1, step, set: null });
  for (const set of sets)
    for (const step of on.filter((s) => s.perSet)) out.push({ seq: out.length + 1, step, set });
  return out;
}

const stepKey = (name: string, set: string | null) => `${name}:${set ?? ''}`;
const label = (name: string, set: string | null) => (set ? `${name} ${set}` : name);

/**
 * One pipeline execution: load the watched folder, then, holding the (set, cutoff) locks, plan
 * each set, skip what is already done on the same inputs, resume a failed run from its failed
 * step, and run check -> build -> audit -> export -> publish, recording every step.
 */
export async function runPipeline(ctx: RunnerContext, req: RunRequest): Promise<RunOutcome> {
  const { db, config, reporter } = ctx;
  let load = await ctx.stages.loadWatched(db, config, reporter);
  const cutoff = resolveCutoffSpec(req.cutoff, {
    now: req.now ?? new Date(),
    timeZone: req.timeZone,
    latestSalesDay: req.cutoff === 'latest' ? await latestSalesDay(db) : null,
  });
  if (!load?.error) load = await awaitFreshSales(ctx, cutoff, load, req.stop);
  const sets = runSets(config, ctx.stages.setNames(config), req.sets);
  const keys = sets.map((s) => runLockKey(db.schema, s, cutoff));
  const describe = async (holders: readonly LockHolder[]) => {
    const running = (await listRuns(db, { status: 'running', limit: 50 })).filter(
      (r) => r.cutoff === cutoff && r.sets.some((s) => sets.includes(s)),
    );
    const runs = running.map(
      (r) => `run ${r.runId} (pid ${r.holderPid} on ${r.holderHost}, started ${r.startedAt.toISOString()})`,
    );
    return [...runs, describeHolders(holders)].join('; ');
  };
  return withRunLocks(
    ctx.lockDb,
    keys,
    {
      wait: req.wait,
      describe,
      onWait: async (holders) =>
        reporter.info(`waiting: ${sets.join(', ')} for ${cutoff} is being run by ${await describe(holders)}`),
    },
    (held) => executeLocked(ctx, req, { cutoff, sets, load, held }),
  );
}

/**
 * Late files: while the newest sales day is older than the cutoff allows
 * (`freshness.maxLagDays`), looks in the watched folder again every `pollMinutes`, for at most
 * `waitMinutes`. Then the run goes on either way; the check judges what arrived.
 */
async function awaitFreshSales(
  ctx: RunnerContext,
  cutoff: string,
  first: LoadOutcome | null,
  stop: AbortSignal | undefined,
): Promise<LoadOutcome | null> {
  const f = ctx.config.pipeline.freshness;
  if (f.waitMinutes <= 0 || !ctx.config.pipeline.watch) return first;
  const expected = formatDay(day(cutoff) - f.maxLagDays);
  const deadline = Date.now() + f.waitMinutes * 60_000;
  let load = first;
  for (;;) {
    const newest = await latestSalesDay(ctx.db);
    if ((newest !== null && newest >= expected) || Date.now() >= deadline || stop?.aborted) return load;
    ctx.reporter.info(
      `waiting for sales through ${expected} (newest ${newest ?? 'none'}); looking again in ${f.pollMinutes} min`,
      { expected, newest },
    );
    await new Promise<void>((resolve) => {
      const t = setTimeout(resolve, Math.min(f.pollMinutes * 60_000, Math.max(0, deadline - Date.now())));
      stop?.addEventListener(
        'abort',
        () => {
          clearTimeout(t);
          resolve();
        },
        { once: true },
      );
    });
    const more = await ctx.stages.loadWatched(ctx.db, ctx.config, ctx.reporter);
    if (more) {
      load = {
        files: [...(load?.files ?? []), ...more.files],
        rows: (load?.rows ?? 0) + more.rows,
        startedAt: load?.startedAt ?? more.startedAt,
        finishedAt: more.finishedAt,
        ...(more.error ? { error: more.error } : {}),
      };
      if (more.error) return load;
    }
  }
}

interface Locked {
  readonly cutoff: string;
  readonly sets: readonly string[];
  readonly load: Awaited<ReturnType<PipelineStages['loadWatched']>>;
  readonly held: HeldLocks;
}

async function executeLocked(ctx: RunnerContext, req: RunRequest, l: Locked): Promise<RunOutcome> {
  const { db, config, reporter, stages } = ctx;
  const { cutoff, sets, load, held } = l;
  const lockSignal = held.signal;
  for (const id of await abandonStaleRuns(db, cutoff, sets)) {
    reporter.warn(`run ${id} was left running by a process that stopped; recorded as failed`, { runId: id });
  }

  const plans = new Map<string, PlannedSet>();
  for (const s of sets) plans.set(s, await stages.plan(db, config, s, cutoff));
  const inputs = Object.fromEntries([...plans].map(([s, p]) => [s, p.inputs]));

  // A failed or interrupted run on the same inputs is taken up where it stopped; otherwise a set
  // whose last completed run saw the same inputs, and whose snapshot still has them, is done.
  const prev = req.force ? undefined : await latestRunFor(db, cutoff, sets);
  const resumable =
    prev && ['failed', 'blocked', 'interrupted'].includes(prev.status) && sameInputs(prev.inputs, inputs);
  const upToDate = new Set<string>();
  if (!req.force && !resumable) {
    for (const s of sets) {
      const last = await lastCompletedFor(db, s, cutoff);
      const current = await stages.snapshotInputs(db, s, cutoff);
      const now = inputs[s]!;
      const same = (x: SetInputs | undefined | null) =>
        !!x && x.definitionHash === now.definitionHash && x.dataFingerprint === now.dataFingerprint;
      if (last && same(last.inputs[s]) && same(current)) upToDate.add(s);
    }
  }
  const base = {
    cutoff,
    sets,
    trigger: req.trigger,
    scheduledFor: req.scheduledFor,
    inputs,
    forced: req.force,
    holder: ctx.holder,
  };
  if (!load?.error && upToDate.size === sets.length) {
    const message = `up to date: ${sets.join(', ')} for ${cutoff} already ran to completion on the same inputs (use --force to rerun)`;
    const run = await createRun(db, { ...base, status: 'skipped', message });
    if (load?.files.length) await recordLoad(db, run, load);
    reporter.info(message, { runId: run.runId });
    return { runId: run.runId, status: 'skipped', cutoff, sets, resumed: false, message };
  }

  const run = resumable ? await resumeRun(db, prev.runId, ctx.holder) : await createRun(db, base);
  const resumed = !!resumable;
  const history = resumed ? await listSteps(db, run.runId) : [];
  reporter.info(
    resumed
      ? `run ${run.runId} resumed (attempt ${run.attempt}) for ${cutoff}: ${sets.join(', ')}`
      : `run ${run.runId} started for ${cutoff}: ${sets.join(', ')}`,
    { runId: run.runId, cutoff, sets },
  );
  const outcome = (status: RunStatus, message: string): RunOutcome => ({
    runId: run.runId,
    status,
    cutoff,
    sets,
    resumed,
    message,
  });

  if (load) await recordLoad(db, run, load);
  if (load?.error) {
    const message = `load failed: ${load.error.message}`;
    await finishRun(db, run, {
      status: 'failed',
      errorCode: load.error.code,
      error: load.error.message,
      message,
    });
    reporter.error(message, { runId: run.runId, code: load.error.code });
    return outcome('failed', message);
  }

  const state: RunState = { plans };
  const sequence = stepSequence(config, stages.steps, sets);
  // The last step of each set: when it is done, so is the set (what "completed" means later).
  const lastOfSet = new Set(sets.map((s) => sequence.filter((p) => p.set === s).at(-1)?.seq));
  for (const { seq, step, set } of sequence) {
    const name = label(step.name, set);
    if (lockSignal.aborted) return fail(ctx, run, null, name, lockSignal.reason, outcome);
    if (req.stop?.aborted) {
      const message = `interrupted before ${name}; the next run resumes here`;
      await finishRun(db, run, { status: 'interrupted', message });
      reporter.warn(message, { runId: run.runId });
      return outcome('interrupted', message);
    }
    const before = latestOf(history, step.name, set);
    if (before && (before.status === 'succeeded' || before.status === 'skipped')) {
      carryState(state, step.name, before);
      reporter.info(`${name}: already done in attempt ${before.attempt}`, {
        runId: run.runId,
        step: step.name,
        set,
      });
      continue;
    }
    const stepId = await startStep(db, {
      runId: run.runId,
      seq,
      name: step.name,
      setName: set,
      attempt: run.attempt,
    });
    if (set && upToDate.has(set)) {
      await finishStep(db, stepId, {
        status: 'skipped',
        details: {
          reason: 'up to date on the same inputs',
          ...(lastOfSet.has(seq) ? { setComplete: true } : {}),
        },
      });
      reporter.info(`${name}: up to date, skipped`, { runId: run.runId, step: step.name, set });
      continue;
    }
    const env: StepEnv = {
      db,
      config,
      reporter,
      run,
      cutoff,
      set,
      stepId,
      signal: lockSignal,
      state,
      settings: { concurrency: req.concurrency, scheduled: req.scheduled, force: req.force },
      note: (details) => noteStep(db, stepId, details),
    };
    const t0 = performance.now();
    reporter.info(`${name} ...`, { runId: run.runId, step: step.name, set });
    try {
      const result = await step.run(env);
      // Nothing is recorded as done by a process that may no longer own the run.
      await held.verify();
      const complete = lastOfSet.has(seq) && result.status !== 'blocked';
      await record(() =>
        finishStep(db, stepId, {
          status: result.status,
          rows: result.rows,
          details: {
            ...(result.details ?? {}),
            ...(result.message ? { message: result.message } : {}),
            ...(complete ? { setComplete: true } : {}),
          },
        }),
      );
      const secs = ((performance.now() - t0) / 1000).toFixed(2);
      const fields = {
        runId: run.runId,
        step: step.name,
        set,
        rows: result.rows ?? null,
        seconds: Number(secs),
      };
      if (result.status === 'blocked') {
        const message = `${name} blocked the run: ${result.message ?? 'see larder runs show'}`;
        await record(() => finishRun(db, run, { status: 'blocked', errorCode: 'BLOCKED', message }));
        reporter.error(message, fields);
        return outcome('blocked', message);
      }
      reporter.info(`${name}: ${result.message ?? result.status} (${secs} s)`, fields);
    } catch (err) {
      return fail(ctx, run, stepId, name, err, outcome);
    }
  }
  const message = `run ${run.runId} succeeded for ${cutoff}: ${sets.join(', ')}`;
  try {
    await held.verify();
  } catch (err) {
    return fail(ctx, run, null, 'finishing the run', err, outcome);
  }
  await record(() => finishRun(db, run, { status: 'succeeded', message }));
  reporter.info(message, { runId: run.runId });
  return outcome('succeeded', message);
}

async function fail(
  ctx: RunnerContext,
  run: RunRecord,
  stepId: number | null,
  name: string,
  err: unknown,
  outcome: (status: RunStatus, message: string) => RunOutcome,
): Promise<RunOutcome> {
  const code = errorCode(err);
  const text = (err as Error)?.message ?? String(err);
  const message = `${name} failed (${code}): ${text}`;
  try {
    if (stepId !== null)
      await record(() => finishStep(ctx.db, stepId, { status: 'failed', errorCode: code, error: text }));
    await record(() => finishRun(ctx.db, run, { status: 'failed', errorCode: code, error: text, message }));
  } catch (recordErr) {
    ctx.reporter.error(`could not record the failure: ${(recordErr as Error).message}`, { runId: run.runId });
  }
  ctx.reporter.error(message, { runId: run.runId, code });
  return outcome('failed', message);
}

function latestOf(history: readonly StepRecord[], name: string, set: string | null): StepRecord | undefined {
  let last: StepRecord | undefined;
  for (const s of history) if (stepKey(s.name, s.setName) === stepKey(name, set)) last = s;
  return last;
}

function carryState(state: RunState, name: string, step: StepRecord): void {
  if (name === 'check' && typeof step.details.checkRunId === 'number')
    state.checkRunId = step.details.checkRunId;
}

async function recordLoad(db: Db, run: RunRecord, load: NonNullable<Locked['load']>): Promise<void> {
  await db.query(
    `INSERT INTO run_steps (run_id, seq, name, set_name, attempt, status, started_at, finished_at, rows, details,
       error_code, error)
     VALUES ($1, 0, 'load', NULL, $2, $3, $4, $5, $6, $7, $8, $9)
     ON CONFLICT (run_id, seq, attempt) DO NOTHING`,
    [
      run.runId,
      run.attempt,
      load.error ? 'failed' : 'succeeded',
      load.startedAt,
      load.finishedAt,
      load.rows,
      JSON.stringify({ files: load.files }),
      load.error?.code ?? null,
      load.error?.message ?? null,
    ],
  );
  if (load.files.length) {
    await db.query('UPDATE pipeline_files SET run_id = $1 WHERE path = ANY ($2::text[]) AND run_id IS NULL', [
      run.runId,
      load.files.map((f) => f.path),
    ]);
  }
}

/**
 * Writes a record, retrying: after the server dropped our connections (a restart,
 * pg_terminate_backend) every pooled connection may be dead and each attempt discards one, so
 * it tries past a whole pool's worth (about 5 s in all); the failure must be kept.
 */
async function record(fn: () => Promise<void>): Promise<void> {
  for (let attempt = 1; ; attempt++) {
    try {
      return await fn();
    } catch (err) {
      if (attempt >= 8) throw err;
      await new Promise((r) => setTimeout(r, Math.min(1000, 250 * attempt)));
    }
  }
}
