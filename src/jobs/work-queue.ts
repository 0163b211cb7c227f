import type { Db, DbSession } from '../db/database.js';

/** The NOTIFY channel that wakes idle workers; the payload is the schema. Polling stays on. */
export const WORK_CHANNEL = 'larder_work';

export interface NewJob {
  readonly runId: number | null;
  readonly kind: string;
  /** Identifies the job's content (e.g. the build plan): an open job with the same key is reused. */
  readonly jobKey: string;
  readonly payload: unknown;
  readonly partitions: readonly string[];
  readonly leaseSeconds: number;
  readonly maxAttempts: number;
}

export interface JobRef {
  readonly jobId: number;
  /** false when an open job with the same key already existed (a resumed step). */
  readonly created: boolean;
}

/**
 * Enqueues one item per partition, or returns the open job with the same key, whose finished
 * items then stay finished. A job left failed by an earlier attempt is reopened by `reopenJob`.
 */
export async function enqueueJob(db: Db, job: NewJob): Promise<JobRef> {
  const ref = await db.transaction(async (tx) => {
    const existing = await tx.query<{ id: number }>(
      `SELECT job_id AS id FROM work_jobs WHERE job_key = $1 AND status = 'open' FOR UPDATE`,
      [job.jobKey],
    );
    if (existing.rows[0]) return { jobId: existing.rows[0].id, created: false };
    const ins = await tx.query<{ id: number }>(
      `INSERT INTO work_jobs (run_id, kind, job_key, payload, status, lease_seconds, max_attempts)
       VALUES ($1, $2, $3, $4, 'open', $5, $6) RETURNING job_id AS id`,
      [
        job.runId,
        job.kind,
        job.jobKey,
        JSON.stringify(job.payload),
        Math.ceil(job.leaseSeconds),
        job.maxAttempts,
      ],
    );
    const jobId = ins.rows[0]!.id;
    await tx.query(
      `INSERT INTO work_items (job_id, partition, status) SELECT $1, p, 'pending' FROM unnest($2::text[]) AS p`,
      [jobId, [...job.partitions]],
    );
    return { jobId, created: true };
  });
  await notifyWork(db);
  return ref;
}

export async function notifyWork(db: DbSession & { schema: string }): Promise<void> {
  await db.query('SELECT pg_notify($1, $2)', [WORK_CHANNEL, db.schema]);
}

/** The open job with this key, or the newest job with it in any state. */
export async function findJob(
  db: DbSession,
  jobKey: string,
): Promise<{ jobId: number; status: string } | undefined> {
  const res = await db.query<{ jobId: number; status: string }>(
    `SELECT job_id AS "jobId", status FROM work_jobs WHERE job_key = $1 ORDER BY (status = 'open') DESC, job_id DESC
     LIMIT 1`,
    [jobKey],
  );
  return res.rows[0];
}

/** Puts a failed or cancelled job back in the queue: failed items get a fresh set of attempts. */
export async function reopenJob(db: Db, jobId: number): Promise<void> {
  await db.transaction(async (tx) => {
    await tx.query(`UPDATE work_jobs SET status = 'open', finished_at = NULL WHERE job_id = $1`, [jobId]);
    await tx.query(
      `UPDATE work_items SET status = 'pending', attempts = 0, claimed_by = NULL, heartbeat_at = NULL
       WHERE job_id = $1 AND status IN ('failed', 'running')`,
      [jobId],
    );
  });
  await notifyWork(db);
}

/**
 * Closes a job. Items still pending or running are released (a worker holding one finds its
 * claim gone at the next heartbeat): the job's outcome no longer depends on them.
 */
export async function closeJob(db: DbSession, jobId: number, status: 'done' | 'failed' | 'cancelled') {
  await db.query(`UPDATE work_jobs SET status = $2, finished_at = now() WHERE job_id = $1`, [jobId, status]);
  await db.query(
    `UPDATE work_items SET status = 'failed', claimed_by = NULL, finished_at = now(),
       error_code = coalesce(error_code, 'JOB_CLOSED'), error = coalesce(error, 'the job was closed ' || $2)
     WHERE job_id = $1 AND status IN ('pending', 'running')`,
    [jobId, status],
  );
}

/** An item a worker holds, with what its job carries. */
export interface ClaimedItem {
  readonly itemId: number;
  readonly jobId: number;
  readonly kind: string;
  readonly partition: string;
  readonly payload: unknown;
  /** The claim's attempt number: the fence that keeps a presumed-dead worker from overwriting. */
  readonly attempt: number;
  readonly leaseSeconds: number;
}

export interface ClaimFilter {
  readonly jobId?: number | undefined;
  readonly kinds?: readonly string[] | undefined;
}

/**
 * Claims the next pending item, or a running one whose worker stopped heartbeating for longer
 * than the job's lease (its process died or lost the network), with `FOR UPDATE SKIP LOCKED` so
 * concurrent claimers never wait on each other or take the same row. Time is the database's
 * `now()`, one clock for every machine. An expired item that already used every attempt is not
 * claimed again; `failExhausted` records it as failed.
 */
export const CLAIM_SQL = `
  WITH next AS (
    SELECT i.item_id FROM work_items i JOIN work_jobs j ON j.job_id = i.job_id
    WHERE j.status = 'open'
      AND ($2::int8 IS NULL OR j.job_id = $2) AND ($3::text[] IS NULL OR j.kind = ANY ($3))
      AND i.attempts < j.max_attempts
      AND (i.status = 'pending'
           OR (i.status = 'running' AND i.heartbeat_at < now() - make_interval(secs => j.lease_seconds)))
    ORDER BY j.job_id, i.item_id
    LIMIT 1
    FOR UPDATE OF i SKIP LOCKED
  )
  UPDATE work_items i SET status = 'running', attempts = i.attempts + 1, claimed_by = $1, claimed_at = now(),
    heartbeat_at = now(), error = NULL, error_code = NULL
  FROM next, work_jobs j
  WHERE i.item_id = next.item_id AND j.job_id = i.job_id
  RETURNING i.item_id AS "itemId", i.job_id AS "jobId", j.kind, i.partition, j.payload, i.attempts AS attempt,
    j.lease_seconds AS "leaseSeconds"`;

export async function claimItem(db: DbSession, workerId: string, filter: ClaimFilter = {}) {
  const res = await db.query<ClaimedItem>(CLAIM_SQL, [
    workerId,
    filter.jobId ?? null,
    filter.kinds ? [...filter.kinds] : null,
  ]);
  return res.rows[0];
}

const FENCE = 'item_id = $1 AND attempts = $2 AND claimed_by = $3 AND status = $4';

/** Renews the claim; false when the item was reclaimed by someone else (stop working on it). */
export async function heartbeat(db: DbSession, item: ClaimedItem, workerId: string): Promise<boolean> {
  const res = await db.query(`UPDATE work_items SET heartbeat_at = now() WHERE ${FENCE}`, [
    item.itemId,
    item.attempt,
    workerId,
    'running',
  ]);
  return res.rowCount === 1;
}

export async function completeItem(
  db: DbSession,
  item: ClaimedItem,
  workerId: string,
  result: { rows: number; durationMs: number },
): Promise<boolean> {
  const res = await db.query(
    `UPDATE work_items SET status = 'done', finished_at = now(), rows = $5, duration_ms = $6 WHERE ${FENCE}`,
    [item.itemId, item.attempt, workerId, 'running', result.rows, Math.round(result.durationMs)],
  );
  if (res.rowCount === 1) await notifyJobChange(db, item.jobId);
  return res.rowCount === 1;
}

/** Records a failed attempt: the item returns to the queue until its attempts are used up. */
export async function failItem(
  db: DbSession,
  item: ClaimedItem,
  workerId: string,
  error: { code: string; message: string },
): Promise<void> {
  await db.query(
    `UPDATE work_items i SET status = CASE WHEN i.attempts >= j.max_attempts THEN 'failed' ELSE 'pending' END,
       error_code = $5, error = $6, finished_at = now(), claimed_by = NULL, heartbeat_at = NULL
     FROM work_jobs j
     WHERE j.job_id = i.job_id AND i.item_id = $1 AND i.attempts = $2 AND i.claimed_by = $3 AND i.status = $4`,
    [item.itemId, item.attempt, workerId, 'running', error.code, error.message.slice(0, 4000)],
  );
  await notifyJobChange(db, item.jobId);
}

/** Gives an item back without spending an attempt (the worker is stopping). */
export async function releaseItem(db: DbSession, item: ClaimedItem, workerId: string): Promise<void> {
  await db.query(
    `UPDATE work_items SET status = 'pending', attempts = attempts - 1, claimed_by = NULL, heartbeat_at = NULL
     WHERE ${FENCE}`,
    [item.itemId, item.attempt, workerId, 'running'],
  );
}

/** Running items whose lease expired after their last allowed attempt: recorded as failed. */
export async function failExhausted(db: DbSession, jobId: number): Promise<number> {
  const res = await db.query(
    `UPDATE work_items i SET status = 'failed', finished_at = now(), error_code = coalesce(i.error_code, 'WORKER_LOST'),
       error = coalesce(i.error, 'the worker ' || coalesce(i.claimed_by, '?') || ' stopped heartbeating on its last attempt')
     FROM work_jobs j
     WHERE j.job_id = i.job_id AND i.job_id = $1 AND i.status = 'running' AND i.attempts >= j.max_attempts
       AND i.heartbeat_at < now() - make_interval(secs => j.lease_seconds)`,
    [jobId],
  );
  return res.rowCount;
}

async function notifyJobChange(db: DbSession, jobId: number): Promise<void> {
  await db.query('SELECT pg_notify($1, $2)', [`${WORK_CHANNEL}_job`, String(jobId)]);
}

/** Where a job stands, counted from the table (items done by any machine's workers). */
export interface JobProgress {
  readonly total: number;
  readonly pending: number;
  readonly running: number;
  readonly done: number;
  readonly failed: number;
  readonly rows: number;
  readonly reclaimed: number;
  readonly firstError: { partition: string; code: string | null; message: string | null } | null;
}

export async function jobProgress(db: DbSession, jobId: number): Promise<JobProgress> {
  const res = await db.query<Omit<JobProgress, 'firstError'>>(
    `SELECT count(*)::int AS total,
       count(*) FILTER (WHERE status = 'pending')::int AS pending,
       count(*) FILTER (WHERE status = 'running')::int AS running,
       count(*) FILTER (WHERE status = 'done')::int AS done,
       count(*) FILTER (WHERE status = 'failed')::int AS failed,
       coalesce(sum(rows) FILTER (WHERE status = 'done'), 0)::int8 AS rows,
       count(*) FILTER (WHERE attempts > 1)::int AS reclaimed
     FROM work_items WHERE job_id = $1`,
    [jobId],
  );
  const err = await db.query<{ partition: string; code: string | null; message: string | null }>(
    `SELECT partition, error_code AS code, error AS message FROM work_items
     WHERE job_id = $1 AND status = 'failed' ORDER BY item_id LIMIT 1`,
    [jobId],
  );
  return { ...res.rows[0]!, firstError: err.rows[0] ?? null };
}

export interface ItemRecord {
  readonly partition: string;
  readonly status: string;
  readonly attempts: number;
  readonly claimedBy: string | null;
  readonly rows: number | null;
  readonly durationMs: number | null;
  readonly errorCode: string | null;
  readonly error: string | null;
}

export async function listItems(db: DbSession, jobId: number): Promise<ItemRecord[]> {
  const res = await db.query<ItemRecord>(
    `SELECT partition, status, attempts, claimed_by AS "claimedBy", rows, duration_ms AS "durationMs",
       error_code AS "errorCode", error FROM work_items WHERE job_id = $1 ORDER BY item_id`,
    [jobId],
  );
  return res.rows;
}
