import type { DbSession } from '../db/database.js';

/** How a run ended (or that it is still going). */
export type RunStatus = 'running' | 'succeeded' | 'failed' | 'blocked' | 'interrupted' | 'skipped';
export type StepStatus = 'running' | 'succeeded' | 'failed' | 'blocked' | 'skipped';

/** What a set's snapshot is built from: equal inputs give an equal snapshot. */
export interface SetInputs {
  readonly definitionHash: string;
  readonly dataFingerprint: string;
}

/** Which process holds a run: written when the run starts or resumes. */
export interface RunHolder {
  readonly pid: number;
  readonly host: string;
  readonly app: string;
}

export interface RunRecord {
  readonly runId: number;
  readonly cutoff: string;
  readonly sets: readonly string[];
  readonly trigger: string;
  readonly scheduledFor: Date | null;
  readonly status: RunStatus;
  readonly inputs: Readonly<Record<string, SetInputs>>;
  readonly forced: boolean;
  readonly attempt: number;
  readonly holderPid: number | null;
  readonly holderHost: string | null;
  readonly holderApp: string | null;
  readonly startedAt: Date;
  readonly finishedAt: Date | null;
  readonly errorCode: string | null;
  readonly error: string | null;
  readonly message: string | null;
}

export interface StepRecord {
  readonly stepId: number;
  readonly runId: number;
  readonly seq: number;
  readonly name: string;
  readonly setName: string | null;
  readonly attempt: number;
  readonly status: StepStatus;
  readonly startedAt: Date;
  readonly finishedAt: Date | null;
  readonly rows: number | null;
  readonly details: Readonly<Record<string, unknown>>;
  readonly errorCode: string | null;
  readonly error: string | null;
}

const RUN_COLUMNS = `run_id AS "runId", cutoff, sets, trigger, scheduled_for AS "scheduledFor", status, inputs,
  forced, attempt, holder_pid AS "holderPid", holder_host AS "holderHost", holder_app AS "holderApp",
  started_at AS "startedAt", finished_at AS "finishedAt", error_code AS "errorCode", error, message`;

const STEP_COLUMNS = `step_id AS "stepId", run_id AS "runId", seq, name, set_name AS "setName", attempt, status,
  started_at AS "startedAt", finished_at AS "finishedAt", rows, details, error_code AS "errorCode", error`;

export interface NewRun {
  readonly cutoff: string;
  readonly sets: readonly string[];
  readonly trigger: string;
  readonly scheduledFor?: Date | undefined;
  readonly inputs: Readonly<Record<string, SetInputs>>;
  readonly forced: boolean;
  readonly holder: RunHolder;
  readonly status?: RunStatus;
  readonly message?: string;
}

export async function createRun(db: DbSession, run: NewRun): Promise<RunRecord> {
  const res = await db.query<RunRecord>(
    `INSERT INTO runs (cutoff, sets, trigger, scheduled_for, status, inputs, forced, holder_pid, holder_host,
       holder_app, message, finished_at)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, CASE WHEN $5 = 'running' THEN NULL ELSE now() END)
     RETURNING ${RUN_COLUMNS}`,
    [
      run.cutoff,
      [...run.sets],
      run.trigger,
      run.scheduledFor ?? null,
      run.status ?? 'running',
      JSON.stringify(run.inputs),
      run.forced,
      run.holder.pid,
      run.holder.host,
      run.holder.app,
      run.message ?? null,
    ],
  );
  return res.rows[0]!;
}

/** Takes a failed or interrupted run up again under a new attempt number. */
export async function resumeRun(db: DbSession, runId: number, holder: RunHolder): Promise<RunRecord> {
  const res = await db.query<RunRecord>(
    `UPDATE runs SET status = 'running', attempt = attempt + 1, holder_pid = $2, holder_host = $3, holder_app = $4,
       finished_at = NULL, error_code = NULL, error = NULL, message = NULL
     WHERE run_id = $1 RETURNING ${RUN_COLUMNS}`,
    [runId, holder.pid, holder.host, holder.app],
  );
  return res.rows[0]!;
}

export interface RunEnd {
  readonly status: Exclude<RunStatus, 'running'>;
  readonly errorCode?: string | undefined;
  readonly error?: string | undefined;
  readonly message?: string | undefined;
}

/**
 * Records how an attempt ended. Fenced by the attempt number: a process that lost its lock and
 * finishes late cannot overwrite the attempt of the process that took the run over.
 */
export async function finishRun(
  db: DbSession,
  run: Pick<RunRecord, 'runId' | 'attempt'>,
  end: RunEnd,
): Promise<void> {
  await db.query(
    `UPDATE runs SET status = $3, finished_at = now(), error_code = $4, error = $5, message = $6
     WHERE run_id = $1 AND attempt = $2`,
    [run.runId, run.attempt, end.status, end.errorCode ?? null, end.error ?? null, end.message ?? null],
  );
}

export async function setRunInputs(
  db: DbSession,
  runId: number,
  inputs: Record<string, SetInputs>,
): Promise<void> {
  await db.query('UPDATE runs SET inputs = $2 WHERE run_id = $1', [runId, JSON.stringify(inputs)]);
}

export interface NewStep {
  readonly runId: number;
  readonly seq: number;
  readonly name: string;
  readonly setName: string | null;
  readonly attempt: number;
}

export async function startStep(db: DbSession, step: NewStep): Promise<number> {
  const res = await db.query<{ id: number }>(
    `INSERT INTO run_steps (run_id, seq, name, set_name, attempt, status) VALUES ($1, $2, $3, $4, $5, 'running')
     ON CONFLICT (run_id, seq, attempt) DO UPDATE SET status = 'running', started_at = now(), finished_at = NULL,
       error = NULL, error_code = NULL
     RETURNING step_id AS id`,
    [step.runId, step.seq, step.name, step.setName, step.attempt],
  );
  return res.rows[0]!.id;
}

export interface StepEnd {
  readonly status: Exclude<StepStatus, 'running'>;
  readonly rows?: number | undefined;
  readonly details?: Readonly<Record<string, unknown>> | undefined;
  readonly errorCode?: string | undefined;
  readonly error?: string | undefined;
}

export async function finishStep(db: DbSession, stepId: number, end: StepEnd): Promise<void> {
  await db.query(
    `UPDATE run_steps SET status = $2, finished_at = now(), rows = $3, details = details || $4::jsonb,
       error_code = $5, error = $6
     WHERE step_id = $1`,
    [
      stepId,
      end.status,
      end.rows ?? null,
      JSON.stringify(end.details ?? {}),
      end.errorCode ?? null,
      end.error ?? null,
    ],
  );
}

/** Merges progress details into a running step (e.g. the build's job id, so a resume finds it). */
export async function noteStep(db: DbSession, stepId: number, details: Readonly<Record<string, unknown>>) {
  await db.query('UPDATE run_steps SET details = details || $2::jsonb WHERE step_id = $1', [
    stepId,
    JSON.stringify(details),
  ]);
}

export async function getRun(db: DbSession, runId: number): Promise<RunRecord | undefined> {
  return (await db.query<RunRecord>(`SELECT ${RUN_COLUMNS} FROM runs WHERE run_id = $1`, [runId])).rows[0];
}

export interface RunFilter {
  readonly limit?: number;
  readonly set?: string | undefined;
  readonly status?: RunStatus | undefined;
}

export async function listRuns(db: DbSession, filter: RunFilter = {}): Promise<RunRecord[]> {
  const res = await db.query<RunRecord>(
    `SELECT ${RUN_COLUMNS} FROM runs
     WHERE ($1::text IS NULL OR $1 = ANY (sets)) AND ($2::text IS NULL OR status = $2)
     ORDER BY run_id DESC LIMIT $3`,
    [filter.set ?? null, filter.status ?? null, filter.limit ?? 20],
  );
  return res.rows;
}

/** Every step row of a run, every attempt, in pipeline order. */
export async function listSteps(db: DbSession, runId: number): Promise<StepRecord[]> {
  const res = await db.query<StepRecord>(
    `SELECT ${STEP_COLUMNS} FROM run_steps WHERE run_id = $1 ORDER BY seq, attempt`,
    [runId],
  );
  return res.rows;
}

/** The newest run over exactly these sets and this cutoff. */
export async function latestRunFor(db: DbSession, cutoff: string, sets: readonly string[]) {
  const res = await db.query<RunRecord>(
    `SELECT ${RUN_COLUMNS} FROM runs
     WHERE cutoff = $1 AND sets = $2::text[] AND status <> 'skipped' ORDER BY run_id DESC LIMIT 1`,
    [cutoff, [...sets]],
  );
  return res.rows[0];
}

/**
 * The newest run that took a set through its last step for a cutoff (the step row marked
 * `setComplete`), with the inputs it saw: a rerun on equal inputs has nothing to do.
 */
export async function lastCompletedFor(db: DbSession, set: string, cutoff: string) {
  const res = await db.query<RunRecord>(
    `SELECT ${RUN_COLUMNS} FROM runs r
     WHERE r.cutoff = $2 AND $1 = ANY (r.sets) AND r.inputs ? $1
       AND EXISTS (SELECT 1 FROM run_steps s WHERE s.run_id = r.run_id AND s.set_name = $1
                   AND s.status IN ('succeeded', 'skipped') AND s.details @> '{"setComplete": true}')
     ORDER BY r.run_id DESC LIMIT 1`,
    [set, cutoff],
  );
  return res.rows[0];
}

/**
 * Runs left `running` by a process that died. Only called while holding the locks of every set
 * involved, so no live process can own them.
 */
export async function abandonStaleRuns(
  db: DbSession,
  cutoff: string,
  sets: readonly string[],
): Promise<number[]> {
  const res = await db.query<{ id: number }>(
    `UPDATE runs SET status = 'failed', finished_at = now(), error_code = 'RUN_ABANDONED',
       error = 'the process running it stopped (pid ' || coalesce(holder_pid::text, '?') || ' on ' ||
               coalesce(holder_host, '?') || ') before it finished'
     WHERE status = 'running' AND cutoff = $1 AND sets && $2::text[]
     RETURNING run_id AS id`,
    [cutoff, [...sets]],
  );
  await db.query(
    `UPDATE run_steps SET status = 'failed', finished_at = now(), error_code = 'RUN_ABANDONED',
       error = 'the process running this step stopped'
     WHERE status = 'running' AND run_id = ANY ($1::int8[])`,
    [res.rows.map((r) => r.id)],
  );
  return res.rows.map((r) => r.id);
}
