import { Redis } from 'ioredis';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../../helpers/servers.js';
import { seedChain, snapshotChecksum } from './chain-fixture.js';
import { type ChildEnv, runnerConfig, spawnLarder, writeConfig } from './processes.js';

const t = useTestDb(import.meta.url);
let env: ChildEnv;
let redis: Redis;
const CUTOFF = '2024-04-29';

beforeAll(async () => {
  const { db, schema } = t();
  await seedChain(db, { stores: 2, items: 8, firstDay: '2024-01-01', days: 120 });
  const redisUrl = await redisServerUrl();
  env = { databaseUrl: await databaseUrl(), redisUrl, schema, configPath: writeConfig(runnerConfig(schema)) };
  redis = new Redis(redisUrl);
});
afterAll(async () => {
  if (!redis) return;
  const keys = await redis.keys(`${t().schema}*`);
  if (keys.length) await redis.del(...keys);
  redis.disconnect();
});

const larder = async (...args: string[]) => spawnLarder(args, env).done;
const count = async (sql: string) =>
  Number((await t().db.query<{ n: number }>(`SELECT (${sql})::int AS n`)).rows[0]!.n);

test('a blocking finding stops the pipeline before build and publish; the run says what blocked', async () => {
  const { db } = t();
  // A hole inside a series' span is a warning (series-gaps), not a block.
  await db.query(
    `DELETE FROM sales WHERE series_id = (SELECT max(series_id) FROM series) AND day = '2024-02-10'`,
  );
  // A negative count blocks (units-sanity): returns larger than sales must be looked at first.
  await db.query(
    `UPDATE sales SET units = -4 WHERE series_id = (SELECT min(series_id) FROM series) AND day = '2024-03-05'`,
  );
  const r = await larder('run', '--cutoff', CUTOFF);
  expect(r.code, r.output).toBe(1);
  expect(r.output).toContain('check blocked the run');
  expect(r.output).toContain('units-sanity 1');
  expect(await count(`SELECT count(*) FROM snapshots`)).toBe(0);
  expect(await count(`SELECT count(*) FROM snapshot_builds`)).toBe(0);
  expect(await count(`SELECT count(*) FROM publishes`)).toBe(0);
  const steps = (
    await db.query<{ name: string; status: string }>('SELECT name, status FROM run_steps ORDER BY seq')
  ).rows;
  expect(steps).toEqual([{ name: 'check', status: 'blocked' }]);
  const run = (await db.query<{ status: string; error_code: string }>('SELECT status, error_code FROM runs'))
    .rows[0]!;
  expect(run).toEqual({ status: 'blocked', error_code: 'BLOCKED' });

  const show = await larder('runs', 'show', '1');
  expect(show.code).toBe(0);
  expect(show.output).toContain('blocking findings (1)');
  expect(show.output).toMatch(/units-sanity\/negative-units\s+item it001 store st01 2024-03-05/);
});

test('warnings do not block: after a waiver the same run resumes from the check and publishes', async () => {
  const { db } = t();
  // A hole inside a series' span is a warning (series-gaps), not a block.
  await db.query(
    `DELETE FROM sales WHERE series_id = (SELECT max(series_id) FROM series) AND day = '2024-02-10'`,
  );
  const w = await larder('waive', '--check', 'units-sanity', '--reason', 'a customer return of four packs');
  expect(w.code, w.output).toBe(0);
  const r = await larder('run', '--cutoff', CUTOFF);
  expect(r.code, r.output).toBe(0);
  expect(r.output).toContain('resumed (attempt 2)');
  const check = (
    await db.query<{ details: { warnings: number; blocking: number; waived: number } }>(
      `SELECT details FROM run_steps WHERE name = 'check' AND attempt = 2`,
    )
  ).rows[0]!.details;
  expect(check.blocking).toBe(0);
  expect(check.warnings).toBeGreaterThan(0);
  expect(check.waived).toBe(1);
  const steps = (
    await db.query<{ name: string; status: string }>(
      `SELECT name, status FROM run_steps WHERE attempt = 2 AND seq > 0 ORDER BY seq`,
    )
  ).rows;
  expect(steps).toEqual([
    { name: 'check', status: 'succeeded' },
    { name: 'build', status: 'succeeded' },
    { name: 'publish', status: 'succeeded' },
  ]);
  const published = (await db.query<{ status: string; keys: number }>('SELECT status, keys FROM publishes'))
    .rows;
  expect(published).toEqual([{ status: 'done', keys: 16 }]);
  // Every series key, plus the version's manifest and pointer, is in Redis under the test's prefix.
  expect((await redis.keys(`${t().schema}*`)).length).toBeGreaterThan(16);
});

test('rerunning on the same inputs does nothing; --force rebuilds to the same cells', async () => {
  const { db } = t();
  const before = await snapshotChecksum(db, 'small', CUTOFF);
  const snapshotId = async () => count(`SELECT snapshot_id FROM snapshots WHERE set_name = 'small'`);
  const built = await snapshotId();
  const same = await larder('run', '--cutoff', CUTOFF);
  expect(same.code, same.output).toBe(0);
  expect(same.output).toContain('up to date');
  expect(await snapshotId()).toBe(built);
  expect(await count(`SELECT count(*) FROM publishes`)).toBe(1);
  expect(await count(`SELECT count(*) FROM runs WHERE status = 'skipped'`)).toBe(1);

  const forced = await larder('run', '--cutoff', CUTOFF, '--force');
  expect(forced.code, forced.output).toBe(0);
  // A rebuild swaps in a new table under a new snapshot id.
  expect(await snapshotId()).not.toBe(built);
  expect(await snapshotChecksum(db, 'small', CUTOFF)).toEqual(before);
  expect(await count(`SELECT count(*) FROM publishes WHERE status = 'done'`)).toBe(2);

  const list = await larder('runs');
  expect(list.output).toMatch(/succeeded\s+2024-04-29/);
  expect(list.output).toMatch(/skipped\s+2024-04-29/);
});
