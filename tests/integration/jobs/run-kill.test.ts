import { afterAll, beforeAll, expect, test } from 'vitest';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../../helpers/servers.js';
import { seedChain, snapshotChecksum } from './chain-fixture.js';
import { type ChildEnv, runnerConfig, spawnLarder, writeConfig } from './processes.js';

const t = useTestDb(import.meta.url);
let env: ChildEnv;
const CUTOFF = '2024-04-18';

beforeAll(async () => {
  const { db, schema } = t();
  await seedChain(db, { stores: 3, items: 6, firstDay: '2024-01-01', days: 110 });
  env = {
    databaseUrl: await databaseUrl(),
    redisUrl: await redisServerUrl(),
    schema,
    configPath: writeConfig(runnerConfig(schema)),
  };
});

afterAll(async () => {
  const { Redis } = await import('ioredis');
  const redis = new Redis(await redisServerUrl());
  const keys = await redis.keys(`${t().schema}*`);
  if (keys.length) await redis.del(...keys);
  redis.disconnect();
});

/** A small deterministic generator (mulberry32), so a failing kill point can be replayed. */
function mulberry32(seed: number) {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let x = a;
    x = Math.imul(x ^ (x >>> 15), x | 1);
    x ^= x + Math.imul(x ^ (x >>> 7), x | 61);
    return ((x ^ (x >>> 14)) >>> 0) / 4294967296;
  };
}

test('a run SIGKILLed at 10 random points: each rerun completes and its snapshot equals a clean build', async () => {
  const { db } = t();
  const t0 = Date.now();
  const first = await spawnLarder(['run', '--cutoff', CUTOFF], env).done;
  expect(first.code, first.output).toBe(0);
  const span = Date.now() - t0;
  const clean = await snapshotChecksum(db, 'small', CUTOFF);

  const random = mulberry32(20240418);
  const outcomes: string[] = [];
  for (let i = 0; i < 10; i++) {
    const at = Math.round(300 + random() * span);
    const victim = spawnLarder(['run', '--cutoff', CUTOFF, '--force'], env);
    const timer = setTimeout(() => victim.proc.kill('SIGKILL'), at);
    const killed = await victim.done;
    clearTimeout(timer);
    const steps = (
      await db.query<{ name: string; status: string }>(
        `SELECT name, status FROM run_steps WHERE run_id = (SELECT max(run_id) FROM runs) ORDER BY seq DESC LIMIT 1`,
      )
    ).rows[0];
    outcomes.push(
      `${at} ms: ${killed.signal ?? `exit ${killed.code}`} at ${steps ? `${steps.name} ${steps.status}` : 'start'}`,
    );

    const rerun = await spawnLarder(['run', '--cutoff', CUTOFF], env).done;
    expect(rerun.code, `${outcomes.join('\n')}\n${rerun.output}`).toBe(0);
    expect(await snapshotChecksum(db, 'small', CUTOFF), outcomes.join('\n')).toEqual(clean);
    const open = await db.query(`SELECT 1 FROM runs WHERE status = 'running'`);
    expect(open.rowCount).toBe(0);
  }
  // At least some kills must land inside a run, or the test proved nothing.
  expect(outcomes.filter((o) => o.includes('SIGKILL')).length, outcomes.join('\n')).toBeGreaterThanOrEqual(5);
}, 600_000);
