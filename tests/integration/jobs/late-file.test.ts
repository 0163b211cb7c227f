import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { formatDay, parseDay } from '../../../src/core/days.js';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../../helpers/servers.js';
import { seedChain, writeSalesCsv } from './chain-fixture.js';
import { type ChildEnv, runnerConfig, spawnLarder, waitFor, writeConfig } from './processes.js';

const t = useTestDb(import.meta.url);
let env: ChildEnv;
let watch: string;
const LAST = '2024-04-19';

beforeAll(async () => {
  const { db, schema } = t();
  await seedChain(db, { stores: 2, items: 4, firstDay: '2024-01-01', days: 110 });
  watch = mkdtempSync(join(tmpdir(), 'larder-late-'));
  env = {
    databaseUrl: await databaseUrl(),
    redisUrl: await redisServerUrl(),
    schema,
    configPath: writeConfig(
      runnerConfig(schema, {
        watch: { dir: watch },
        freshness: { maxLagDays: 0, waitMinutes: 1, pollMinutes: 0.01 },
      }),
    ),
  };
});

afterAll(async () => {
  const { Redis } = await import('ioredis');
  const redis = new Redis(await redisServerUrl());
  const keys = await redis.keys(`${t().schema}*`);
  if (keys.length) await redis.del(...keys);
  redis.disconnect();
});

test('a run for a day whose sales have not arrived waits for the file, loads it and goes on', async () => {
  const { db } = t();
  const day = formatDay(parseDay(LAST)! + 1);
  const run = spawnLarder(['run', '--cutoff', day], env);
  await waitFor(
    async () => run.output().includes(`waiting for sales through ${day} (newest ${LAST})`),
    60_000,
    'the wait',
  );
  await writeSalesCsv(db, day, join(watch, `sales_${day}.csv`));
  const end = await run.done;
  expect(end.code, end.output).toBe(0);
  expect(end.output).toContain(`loading sales_${day}.csv`);
  const load = (
    await db.query<{ rows: number; status: string }>(`SELECT rows, status FROM run_steps WHERE name = 'load'`)
  ).rows;
  expect(load).toEqual([{ rows: 8, status: 'succeeded' }]);
  const built = await db.query('SELECT 1 FROM snapshots WHERE cutoff = $1', [day]);
  expect(built.rowCount).toBe(1);
});
