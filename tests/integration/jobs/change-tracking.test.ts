import { appendFileSync, mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { buildSnapshot } from '../../../src/build/build-snapshot.js';
import { type Config, parseConfig } from '../../../src/config/config.js';
import { formatDay, parseDay } from '../../../src/core/days.js';
import { loadFiles } from '../../../src/load/load-files.js';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../../helpers/servers.js';
import { SMALL_SET, seedChain, snapshotChecksum, writeSalesCsv } from './chain-fixture.js';
import { type ChildEnv, runnerConfig, spawnLarder, writeConfig } from './processes.js';

// The change log decides between a refresh and a full build: appended days and a new series
// refresh; a replace-mode correction of a day the previous snapshot saw, or a write outside the
// loader, builds in full. Every outcome is compared with a full build of the same definition.
const t = useTestDb(import.meta.url);
let env: ChildEnv;
let watch: string;
let rawConfig: Record<string, unknown>;
let config: Config;
const FIRST = '2024-01-01';
const DAYS = 100;
const LAST = formatDay(parseDay(FIRST)! + DAYS - 1);
const plus = (d: string, k: number) => formatDay(parseDay(d)! + k);

beforeAll(async () => {
  const { db, schema } = t();
  await seedChain(db, { stores: 2, items: 5, firstDay: FIRST, days: DAYS });
  // An item with no sales yet: it is first sold in a store on the first refreshed day.
  await db.query(`INSERT INTO items (item_id, dept_id, category_id) VALUES ('it999', 'dp1', 'ct1')`);
  await db.query(
    `INSERT INTO prices (item_id, store_id, week_start, price)
     SELECT 'it999', 'st01', week_start, 2.5 FROM prices WHERE item_id = 'it001' AND store_id = 'st01'`,
  );
  watch = mkdtempSync(join(tmpdir(), 'larder-watch-'));
  rawConfig = runnerConfig(
    schema,
    { watch: { dir: watch }, sets: ['small'] },
    { sets: [SMALL_SET, { ...SMALL_SET, name: 'small_ref' }] },
  );
  env = {
    databaseUrl: await databaseUrl(),
    redisUrl: await redisServerUrl(),
    schema,
    configPath: writeConfig(rawConfig),
  };
  config = parseConfig({ ...rawConfig, database: { url: env.databaseUrl, schema } }, 'test');
});

afterAll(async () => {
  const { Redis } = await import('ioredis');
  const redis = new Redis(await redisServerUrl());
  const keys = await redis.keys(`${t().schema}*`);
  if (keys.length) await redis.del(...keys);
  redis.disconnect();
});

async function lastBuild() {
  const { db } = t();
  return (
    await db.query<{
      details: { mode: string; fingerprint?: { note: string; from: unknown } };
    }>(`SELECT details FROM run_steps WHERE name = 'build' ORDER BY step_id DESC LIMIT 1`)
  ).rows[0]!.details;
}

/** The snapshot of `small` at `day` equals a full build of the same definition, fingerprint included. */
async function expectSameAsFullBuild(day: string) {
  const { db } = t();
  await buildSnapshot(db, config, { set: 'small_ref', cutoff: day });
  expect(await snapshotChecksum(db, 'small', day), day).toEqual(await snapshotChecksum(db, 'small_ref', day));
  const fps = (
    await db.query<{ data_fingerprint: string }>(
      'SELECT data_fingerprint FROM snapshots WHERE cutoff = $1 ORDER BY set_name',
      [day],
    )
  ).rows;
  expect(fps).toHaveLength(2);
  expect(fps[0]!.data_fingerprint).toBe(fps[1]!.data_fingerprint);
}

async function run() {
  const r = await spawnLarder(['run', '--cutoff', 'latest'], env).done;
  expect(r.code, r.output).toBe(0);
  return r.output;
}

test('appended days and a new series refresh; a replace correction of an older day, or a write outside the loader, builds in full', async () => {
  const { db } = t();
  expect(await run()).toContain('full build (no earlier snapshot of the set)');

  // Day 1: every series, plus the first sale of it999 in st01 (a new series).
  const d1 = plus(LAST, 1);
  const f1 = join(watch, `sales_${d1}.csv`);
  await writeSalesCsv(db, d1, f1);
  appendFileSync(f1, `it999,st01,${d1},3\n`);
  const out1 = await run();
  expect(out1).toContain(`refreshed from ${LAST}`);
  const b1 = await lastBuild();
  expect(b1.mode).toBe('incremental');
  expect(b1.fingerprint?.note).toBe(`advanced from the snapshot of ${LAST}`);
  await expectSameAsFullBuild(d1);
  expect(
    Number(
      (await db.query<{ n: number }>(`SELECT count(*)::int AS n FROM series WHERE item_id = 'it999'`))
        .rows[0]!.n,
    ),
  ).toBe(1);

  // Day 2 appended, then corrected in replace mode before the run: both lie past the previous
  // cutoff, so the run still refreshes.
  const d2 = plus(LAST, 2);
  const dir2 = mkdtempSync(join(tmpdir(), 'larder-fix-'));
  await writeSalesCsv(db, d2, join(dir2, 'day.csv'));
  expect((await loadFiles(db, config, { files: { sales: join(dir2, 'day.csv') } })).ok).toBe(true);
  writeFileSync(join(dir2, 'fix.csv'), `item_id,store_id,day,units\nit001,st01,${d2},40\n`);
  expect((await loadFiles(db, config, { files: { sales: join(dir2, 'fix.csv') }, mode: 'replace' })).ok).toBe(
    true,
  );
  expect(await run()).toContain(`refreshed from ${d1}`);
  expect((await lastBuild()).mode).toBe('incremental');
  await expectSameAsFullBuild(d2);

  // A late correction (replace mode) of a day the previous snapshot saw: a full build that says why.
  const d3 = plus(LAST, 3);
  const old = plus(LAST, -10);
  const fix3 = join(mkdtempSync(join(tmpdir(), 'larder-fix-')), 'fix.csv');
  writeFileSync(fix3, `item_id,store_id,day,units\nit002,st02,${old},17\n`);
  const loaded = await loadFiles(db, config, { files: { sales: fix3 }, mode: 'replace' });
  expect(loaded.ok).toBe(true);
  const batch = loaded.batches[0]!.batchId;
  await writeSalesCsv(db, d3, join(watch, `sales_${d3}.csv`));
  const out3 = await run();
  expect(out3).toContain(
    `full build (data inside the boundaries of the snapshot of ${d2} changed since it was built: sales of ${old} changed (load batch ${batch}), on or before ${d2})`,
  );
  expect((await lastBuild()).mode).toBe('full');
  await expectSameAsFullBuild(d3);

  // The full build left a mark: the next appended day refreshes again.
  const d4 = plus(LAST, 4);
  await writeSalesCsv(db, d4, join(watch, `sales_${d4}.csv`));
  expect(await run()).toContain(`refreshed from ${d3}`);
  await expectSameAsFullBuild(d4);

  // A row deleted by hand: the statement trigger logs it with an unknown range.
  const d5 = plus(LAST, 5);
  await db.query(
    `DELETE FROM sales WHERE series_id = (SELECT series_id FROM series WHERE item_id = 'it003' AND store_id = 'st01') AND day = $1`,
    [plus(LAST, -3)],
  );
  await writeSalesCsv(db, d5, join(watch, `sales_${d5}.csv`));
  const out5 = await run();
  expect(out5).toContain(`sales changed outside the loader`);
  const b5 = await lastBuild();
  expect(b5.mode).toBe('full');
  // The run's fingerprint was a full scan too, for the same reason.
  expect(b5.fingerprint?.from).toBeNull();
  await expectSameAsFullBuild(d5);
});
