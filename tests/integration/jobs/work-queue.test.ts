import { join } from 'node:path';
import { beforeAll, expect, test } from 'vitest';
import { closeJob, enqueueJob, jobProgress, listItems } from '../../../src/jobs/work-queue.js';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl } from '../../helpers/servers.js';
import { type ChildEnv, spawnNode, waitFor, writeConfig } from './processes.js';

const t = useTestDb(import.meta.url);
const PROBE = join(import.meta.dirname, 'fixtures/probe-worker.ts');
let env: ChildEnv;

beforeAll(async () => {
  const { db, schema } = t();
  await db.exec(`CREATE TABLE probe_out (partition text PRIMARY KEY, total int8 NOT NULL);
    CREATE TABLE probe_log (partition text NOT NULL, worker_pid int4 NOT NULL, at timestamptz DEFAULT now());`);
  env = {
    databaseUrl: await databaseUrl(),
    schema,
    configPath: writeConfig({
      pipeline: { workers: { heartbeatSeconds: 0.2, timeoutSeconds: 1.5, pollSeconds: 0.1 } },
    }),
  };
});

const PARTITIONS = Array.from({ length: 12 }, (_, i) => `store_${String(i + 1).padStart(2, '0')}`);

// Sum of 1..m is m(m+1)/2 (Gauss's formula, common practice); m = n + length(partition).
const expectedTotal = (n: number, p: string) => ((n + p.length) * (n + p.length + 1)) / 2;

async function results(): Promise<Record<string, number>> {
  const rows = (
    await t().db.query<{ partition: string; total: number }>('SELECT * FROM probe_out ORDER BY 1')
  ).rows;
  return Object.fromEntries(rows.map((r) => [r.partition, r.total]));
}

test('three workers share a job, one is SIGKILLed holding an item: the item is reclaimed and the result is complete', async () => {
  const { db } = t();
  await db.exec('TRUNCATE probe_out, probe_log');
  const n = 1000;
  const job = await enqueueJob(db, {
    runId: null,
    kind: 'probe',
    jobKey: 'probe-kill',
    payload: { n, holdMs: 400 },
    partitions: PARTITIONS,
    leaseSeconds: 1.5,
    maxAttempts: 3,
  });
  const workers = [0, 1, 2].map(() => spawnNode(PROBE, ['1'], env));
  const victim = workers[1]!;
  // Wait until the victim holds an item, then kill it without a chance to clean up.
  const held = await waitFor(
    async () =>
      (
        await db.query<{ partition: string }>(
          `SELECT partition FROM work_items WHERE status = 'running' AND claimed_by LIKE $1`,
          [`%:${victim.proc.pid}/%`],
        )
      ).rows[0]?.partition,
    30_000,
    'the victim to claim an item',
  );
  victim.proc.kill('SIGKILL');
  await waitFor(
    async () => (await jobProgress(db, job.jobId)).done === PARTITIONS.length,
    60_000,
    'all items done',
  );
  await closeJob(db, job.jobId, 'done');
  const ends = await Promise.all(workers.map((w) => w.done));
  expect(ends[1]!.signal).toBe('SIGKILL');
  expect(ends[0]!.code, ends[0]!.output).toBe(0);
  expect(ends[2]!.code, ends[2]!.output).toBe(0);

  const items = await listItems(db, job.jobId);
  const reclaimed = items.find((i) => i.partition === held)!;
  expect(reclaimed.status).toBe('done');
  expect(reclaimed.attempts).toBe(2);
  expect(reclaimed.claimedBy).not.toContain(`:${victim.proc.pid}/`);
  expect(await results()).toEqual(Object.fromEntries(PARTITIONS.map((p) => [p, expectedTotal(n, p)])));
});

test('no item is worked by two workers at once, and one process gives the same result as three', async () => {
  const { db } = t();
  await db.exec('TRUNCATE probe_out, probe_log');
  const job = await enqueueJob(db, {
    runId: null,
    kind: 'probe',
    jobKey: 'probe-one',
    payload: { n: 77, holdMs: 20 },
    partitions: PARTITIONS,
    leaseSeconds: 1.5,
    maxAttempts: 3,
  });
  const one = spawnNode(PROBE, ['1'], env);
  await waitFor(
    async () => (await jobProgress(db, job.jobId)).done === PARTITIONS.length,
    60_000,
    'all items done',
  );
  await closeJob(db, job.jobId, 'done');
  expect((await one.done).code).toBe(0);
  const single = await results();

  await db.exec('TRUNCATE probe_out, probe_log');
  const job3 = await enqueueJob(db, {
    runId: null,
    kind: 'probe',
    jobKey: 'probe-three',
    payload: { n: 77, holdMs: 20 },
    partitions: PARTITIONS,
    leaseSeconds: 1.5,
    maxAttempts: 3,
  });
  const three = [0, 1, 2].map(() => spawnNode(PROBE, ['2'], env));
  await waitFor(
    async () => (await jobProgress(db, job3.jobId)).done === PARTITIONS.length,
    60_000,
    'all items done',
  );
  await closeJob(db, job3.jobId, 'done');
  await Promise.all(three.map((w) => w.done));
  expect(await results()).toEqual(single);
  // Each partition was started exactly once: SKIP LOCKED never hands one row to two claimers.
  const starts = (
    await db.query<{ partition: string; n: number }>(
      'SELECT partition, count(*)::int AS n FROM probe_log GROUP BY 1',
    )
  ).rows;
  expect(starts.every((s) => s.n === 1)).toBe(true);
  expect(starts).toHaveLength(PARTITIONS.length);
});

test('an open job with the same key is reused, so a resumed step keeps its finished items', async () => {
  const { db } = t();
  const a = await enqueueJob(db, {
    runId: null,
    kind: 'probe',
    jobKey: 'probe-reuse',
    payload: {},
    partitions: ['a', 'b'],
    leaseSeconds: 5,
    maxAttempts: 1,
  });
  await db.query(`UPDATE work_items SET status = 'done' WHERE job_id = $1 AND partition = 'a'`, [a.jobId]);
  const b = await enqueueJob(db, {
    runId: null,
    kind: 'probe',
    jobKey: 'probe-reuse',
    payload: {},
    partitions: ['a', 'b'],
    leaseSeconds: 5,
    maxAttempts: 1,
  });
  expect(b).toEqual({ jobId: a.jobId, created: false });
  expect((await jobProgress(db, a.jobId)).done).toBe(1);
  await closeJob(db, a.jobId, 'cancelled');
});
