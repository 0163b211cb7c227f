import { afterAll, beforeAll, expect, test } from 'vitest';
import type { Db } from '../../../src/db/database.js';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../../helpers/servers.js';
import { seedChain, snapshotChecksum } from './chain-fixture.js';
import { type ChildEnv, runnerConfig, spawnLarder, waitFor, writeConfig } from './processes.js';

const t = useTestDb(import.meta.url);
let env: ChildEnv;
const CUTOFF = '2024-04-18';
let clean: { rows: number; md5: string };

beforeAll(async () => {
  const { db, schema } = t();
  await seedChain(db, { stores: 4, items: 6, firstDay: '2024-01-01', days: 110 });
  env = {
    databaseUrl: await databaseUrl(),
    redisUrl: await redisServerUrl(),
    schema,
    configPath: writeConfig(
      runnerConfig(schema, { schedules: [{ name: 'often', cron: '*/2 * * * * *', cutoff: CUTOFF }] }),
    ),
  };
  // The reference: one process, one partition at a time.
  const r = await spawnLarder(['run', '--cutoff', CUTOFF, '--concurrency', '1'], env).done;
  expect(r.code, r.output).toBe(0);
  clean = await snapshotChecksum(db, 'small', CUTOFF);
  expect(clean.rows).toBeGreaterThan(0);
});

afterAll(async () => {
  const { Redis } = await import('ioredis');
  const redis = new Redis(await redisServerUrl());
  const keys = await redis.keys(`${t().schema}*`);
  if (keys.length) await redis.del(...keys);
  redis.disconnect();
});

/**
 * Holds partitions at their last statement: every build partition ends by inserting its
 * completion row, which waits while this session holds an EXCLUSIVE lock on that table. So a
 * test can act while items are claimed and mid-work, without racing a fast build.
 */
async function holdPartitions(db: Db): Promise<() => Promise<void>> {
  let release!: () => void;
  const released = new Promise<void>((r) => (release = r));
  let locked!: () => void;
  const isLocked = new Promise<void>((r) => (locked = r));
  const done = db.transaction(async (tx) => {
    await tx.exec('LOCK TABLE snapshot_build_parts IN EXCLUSIVE MODE');
    locked();
    await released;
  });
  await isLocked;
  return async () => {
    release();
    await done;
  };
}

const q = async <R>(sql: string, params: unknown[] = []) => (await t().db.query<R>(sql, params)).rows;
const running = async () =>
  q<{ claimed_by: string; partition: string }>(
    `SELECT i.claimed_by, i.partition FROM work_items i JOIN work_jobs j USING (job_id)
     WHERE i.status = 'running' AND j.status = 'open'`,
  );

test("the runner's backends terminated mid-build: the run is recorded as failed with the error, and resumes", async () => {
  const { db } = t();
  const release = await holdPartitions(db);
  const child = spawnLarder(['run', '--cutoff', CUTOFF, '--force'], env);
  try {
    await waitFor(async () => (await running()).length > 0, 60_000, 'a claimed partition');
    const killed = await q<{ n: number }>(
      `SELECT count(pg_terminate_backend(pid))::int AS n FROM pg_stat_activity WHERE application_name = $1`,
      [`larder run ${child.proc.pid}@${(await import('node:os')).hostname()}`.slice(0, 63)],
    );
    expect(killed[0]!.n).toBeGreaterThan(0);
  } finally {
    await release();
  }
  const end = await child.done;
  expect(end.code, end.output).toBe(1);
  const [run] = await q<{ run_id: number; status: string; error_code: string; error: string }>(
    'SELECT run_id, status, error_code, error FROM runs ORDER BY run_id DESC LIMIT 1',
  );
  expect(run!.status, end.output).toBe('failed');
  expect(['RUN_LOCK_LOST', '57P01', 'PARTITION_FAILED']).toContain(run!.error_code);
  expect(run!.error.length).toBeGreaterThan(0);

  const again = await spawnLarder(['run', '--cutoff', CUTOFF], env).done;
  expect(again.code, again.output).toBe(0);
  expect(again.output).toContain(`run ${run!.run_id} resumed (attempt 2)`);
  expect(await snapshotChecksum(db, 'small', CUTOFF)).toEqual(clean);
});

test('two runs of the same set and cutoff: one builds, --no-wait exits naming the holder, the other waits', async () => {
  const { db } = t();
  const lastStep = (await q<{ n: number }>('SELECT coalesce(max(step_id), 0)::int AS n FROM run_steps'))[0]!
    .n;
  const release = await holdPartitions(db);
  const a = spawnLarder(['run', '--cutoff', CUTOFF, '--force'], env);
  let waiting: ReturnType<typeof spawnLarder> | undefined;
  try {
    await waitFor(async () => (await running()).length > 0, 60_000, 'the first run to build');
    const [held] = await q<{ run_id: number }>(`SELECT run_id FROM runs WHERE status = 'running'`);
    const b = await spawnLarder(['run', '--cutoff', CUTOFF, '--no-wait'], env).done;
    expect(b.code, b.output).toBe(3);
    expect(b.output).toContain(
      `small ${CUTOFF} is already running: run ${held!.run_id} (pid ${a.proc.pid} on`,
    );
    expect(b.output).toContain(`'larder run ${a.proc.pid}@`);
    waiting = spawnLarder(['run', '--cutoff', CUTOFF], env);
    await waitFor(
      async () => waiting!.output().includes('waiting: small for'),
      60_000,
      'the second run to wait',
    );
  } finally {
    await release();
  }
  const ea = await a.done;
  expect(ea.code, ea.output).toBe(0);
  const ec = await waiting!.done;
  expect(ec.code, ec.output).toBe(0);
  expect(ec.output).toContain('up to date');
  // Exactly one build ran: the first run's; the waiting one found its result up to date.
  const builds = await q<{ status: string }>(
    `SELECT status FROM run_steps WHERE name = 'build' AND step_id > $1`,
    [lastStep],
  );
  expect(builds).toEqual([{ status: 'succeeded' }]);
  const [last] = await q<{ status: string }>('SELECT status FROM runs ORDER BY run_id DESC LIMIT 1');
  expect(last!.status).toBe('skipped');
  expect(await snapshotChecksum(db, 'small', CUTOFF)).toEqual(clean);
});

test('three workers, one SIGKILLed while holding an item: the item is reclaimed, the result equals one process', async () => {
  const { db } = t();
  const release = await holdPartitions(db);
  const runner = spawnLarder(['run', '--cutoff', CUTOFF, '--force', '--concurrency', '0'], env);
  const workers = [0, 1, 2].map(() => spawnLarder(['worker', '--concurrency', '1'], env));
  const victim = workers[1]!;
  let held: string | undefined;
  try {
    await waitFor(
      async () => new Set((await running()).map((r) => r.claimed_by.split('/')[0])).size === 3,
      90_000,
      'each worker to hold an item',
    );
    held = (await running()).find((r) => r.claimed_by.includes(`:${victim.proc.pid}/`))?.partition;
    expect(held).toBeDefined();
    victim.proc.kill('SIGKILL');
  } finally {
    await release();
  }
  const end = await runner.done;
  expect(end.code, end.output).toBe(0);
  for (const w of [workers[0]!, workers[2]!]) w.proc.kill('SIGTERM');
  const ends = await Promise.all(workers.map((w) => w.done));
  expect(ends[1]!.signal).toBe('SIGKILL');
  expect(ends[0]!.code, ends[0]!.output).toBe(0);
  expect(ends[2]!.code, ends[2]!.output).toBe(0);
  const [item] = await q<{ attempts: number; status: string; claimed_by: string }>(
    `SELECT attempts, status, claimed_by FROM work_items WHERE job_id = (SELECT max(job_id) FROM work_jobs) AND partition = $1`,
    [held],
  );
  expect(item!.status).toBe('done');
  expect(item!.attempts).toBe(2);
  expect(item!.claimed_by).not.toContain(`:${victim.proc.pid}/`);
  expect(await snapshotChecksum(db, 'small', CUTOFF)).toEqual(clean);
});

test('SIGTERM lets the current step finish, records the run as interrupted, and the next run resumes after it', async () => {
  const { db } = t();
  const release = await holdPartitions(db);
  const a = spawnLarder(['run', '--cutoff', CUTOFF, '--force'], env);
  try {
    await waitFor(async () => (await running()).length > 0, 60_000, 'a claimed partition');
    a.proc.kill('SIGTERM');
    await waitFor(async () => a.output().includes('SIGTERM'), 30_000, 'the runner to see SIGTERM');
  } finally {
    await release();
  }
  const end = await a.done;
  expect(end.code, end.output).toBe(1);
  expect(end.output).toContain('interrupted before publish small');
  const [run] = await q<{ run_id: number; status: string }>(
    'SELECT run_id, status FROM runs ORDER BY run_id DESC LIMIT 1',
  );
  expect(run!.status).toBe('interrupted');
  const next = await spawnLarder(['run', '--cutoff', CUTOFF], env).done;
  expect(next.code, next.output).toBe(0);
  expect(next.output).toContain('build small: already done in attempt 1');
  const steps = await q<{ name: string; attempt: number; status: string }>(
    `SELECT name, attempt, status FROM run_steps WHERE run_id = $1 AND seq > 0 ORDER BY seq, attempt`,
    [run!.run_id],
  );
  expect(steps).toEqual([
    { name: 'check', attempt: 1, status: 'succeeded' },
    { name: 'build', attempt: 1, status: 'succeeded' },
    { name: 'publish', attempt: 2, status: 'succeeded' },
  ]);
  expect(await snapshotChecksum(db, 'small', CUTOFF)).toEqual(clean);
});

test('larder schedule runs on its cron, one run per firing, and stops cleanly on SIGTERM', async () => {
  const s = spawnLarder(['schedule'], env);
  await waitFor(
    async () =>
      (await q<{ n: number }>(`SELECT count(*)::int AS n FROM runs WHERE trigger = 'schedule:often'`))[0]!
        .n >= 2,
    90_000,
    'two scheduled runs',
  );
  s.proc.kill('SIGTERM');
  const end = await s.done;
  expect(end.code, end.output).toBe(0);
  expect(end.output).toContain('scheduler stopped');
  const runs = await q<{ status: string; scheduled_for: Date }>(
    `SELECT status, scheduled_for FROM runs WHERE trigger = 'schedule:often' ORDER BY run_id`,
  );
  // The data did not change, so every firing finds the snapshot up to date.
  expect(runs.every((r) => r.status === 'skipped')).toBe(true);
  for (const r of runs) expect(r.scheduled_for.getUTCSeconds() % 2).toBe(0);
});
