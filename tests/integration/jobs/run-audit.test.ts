import { afterAll, beforeAll, expect, test } from 'vitest';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../../helpers/servers.js';
import { seedChain } from './chain-fixture.js';
import { type ChildEnv, runnerConfig, spawnLarder, writeConfig } from './processes.js';

const t = useTestDb(import.meta.url);
let env: ChildEnv;

beforeAll(async () => {
  const { db, schema } = t();
  await seedChain(db, { stores: 2, items: 5, firstDay: '2024-01-01', days: 110 });
  env = {
    databaseUrl: await databaseUrl(),
    redisUrl: await redisServerUrl(),
    schema,
    configPath: writeConfig(runnerConfig(schema, { steps: { audit: { sample: 4 }, publish: true } })),
  };
});

afterAll(async () => {
  const { Redis } = await import('ioredis');
  const redis = new Redis(await redisServerUrl());
  const keys = await redis.keys(`${t().schema}*`);
  if (keys.length) await redis.del(...keys);
  redis.disconnect();
});

test('with steps.audit the run audits a sample for leaks between build and publish', async () => {
  const r = await spawnLarder(['run', '--cutoff', '2024-04-19'], env).done;
  expect(r.code, r.output).toBe(0);
  const steps = (
    await t().db.query<{
      name: string;
      status: string;
      details: { changedCells?: number; cellsChecked?: number };
    }>('SELECT name, status, details FROM run_steps WHERE seq > 0 ORDER BY seq')
  ).rows;
  expect(steps.map((s) => `${s.name} ${s.status}`)).toEqual([
    'check succeeded',
    'build succeeded',
    'audit succeeded',
    'publish succeeded',
  ]);
  const audit = steps[2]!.details;
  expect(audit.changedCells).toBe(0);
  expect(audit.cellsChecked).toBeGreaterThan(0);
});
