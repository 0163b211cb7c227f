import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { buildSnapshot } from '../../../src/build/build-snapshot.js';
import { type Config, parseConfig } from '../../../src/config/config.js';
import type { Db } from '../../../src/db/database.js';
import { KeyLayout } from '../../../src/publish/layout.js';
import { publishSnapshot } from '../../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../../src/publish/redis-cache.js';
import { formatDay, parseDay } from '../../../src/core/days.js';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../../helpers/servers.js';
import { SMALL_SET, seedChain, snapshotChecksum, writeSalesCsv } from './chain-fixture.js';
import { type ChildEnv, runnerConfig, spawnLarder, writeConfig } from './processes.js';

const t = useTestDb(import.meta.url);
// The runner tests' set plus windows whose weighted mean is not exact in binary (a smoothing
// factor of 2/29) and a trailing window longer than the refreshed span: the refresh must still
// give the full rebuild's cells bit for bit.
const SET = {
  ...SMALL_SET,
  families: {
    ...SMALL_SET.families,
    windows: [
      ...SMALL_SET.families.windows,
      { size: 28, shift: 7, stats: ['mean', 'std', 'min', 'max', 'zero_share', 'ewm'] },
    ],
    lags: { days: [7, 14, 63] },
    // Expanding price statistics read every earlier week: the refreshed rows must see them all.
    prices: {
      features: [
        'price',
        'price_rel_max',
        'price_mean',
        'price_std',
        'price_distinct',
        'price_momentum_1w',
        'price_momentum_4w',
        'dept_same_price',
        'price_rel_dept',
      ],
    },
    encodings: [{ groups: ['item', 'store_department', 'item_region'], window: 28, shift: 7, m: 20 }],
  },
};
let env: ChildEnv;
let watch: string;
let rawConfig: Record<string, unknown>;
const FIRST = '2024-01-01';
const DAYS = 110;
const LAST = formatDay(parseDay(FIRST)! + DAYS - 1);

beforeAll(async () => {
  const { db, schema } = t();
  await seedChain(db, { stores: 3, items: 6, firstDay: FIRST, days: DAYS });
  // A long zero run on one series that is still open at the first cutoff and closes two days
  // later: the stock-out mask of the refreshed rows must match a full rebuild's.
  await db.query(
    `UPDATE sales SET units = 0 WHERE series_id = (SELECT min(series_id) FROM series) AND day > $1::date - 14`,
    [LAST],
  );
  // A series first sold after the first cutoff (on the second new day): the previous snapshot
  // has no rows of it, so the refresh computes it whole and the publish reads it whole.
  await db.query('DELETE FROM sales WHERE series_id = (SELECT max(series_id) FROM series)');
  watch = mkdtempSync(join(tmpdir(), 'larder-watch-'));
  rawConfig = runnerConfig(
    schema,
    { watch: { dir: watch }, sets: ['small'] },
    // The reference: the same definition under another name, always built in full.
    { sets: [SET, { ...SET, name: 'small_ref' }] },
  );
  env = {
    databaseUrl: await databaseUrl(),
    redisUrl: await redisServerUrl(),
    schema,
    configPath: writeConfig(rawConfig),
  };
});

afterAll(async () => {
  const { Redis } = await import('ioredis');
  const redis = new Redis(await redisServerUrl());
  const keys = await redis.keys(`${t().schema}*`);
  if (keys.length) await redis.del(...keys);
  redis.disconnect();
});

let redis: import('ioredis').Redis;
beforeAll(async () => {
  const { Redis } = await import('ioredis');
  redis = new Redis(await redisServerUrl());
});
afterAll(() => redis?.disconnect());
const pointerOf = async (set: string) => (await redis.get(`${t().schema}:{${set}}:current`))!;

/**
 * The run's publish of `small` (which carries the days its refresh kept over from the previous
 * version) against the reference published in full from its own rebuild: every series' vector
 * byte for byte.
 */
async function expectPublishedLikeReference(db: Db, config: Config, day: string, k: number): Promise<void> {
  const step = (
    await db.query<{ details: { carried: number } }>(
      `SELECT details FROM run_steps WHERE name = 'publish' ORDER BY step_id DESC LIMIT 1`,
    )
  ).rows[0]!.details;
  // Day 1 starts a retail week (no prediction row kept); on days 4 and 5 the current version is
  // not one of the previous snapshot: those publish in full. Day 3 reads one series whole.
  if (k === 1 || k >= 4) expect(step.carried, `day ${k}`).toBe(0);
  // Day 2 reads the new series whole; day 3 reads one series whole (its vector was deleted).
  else expect(step.carried, `day ${k}`).toBe(17);
  const cache = createRedisCache({ url: env.redisUrl!, commandTimeoutMs: 10_000 });
  try {
    const ref = await publishSnapshot(db, cache, config, { set: 'small_ref', cutoff: day });
    expect(ref.carried).toBe(0);
  } finally {
    await cache.close();
  }
  const layout = new KeyLayout(config.redis.prefix);
  const [vs, vr] = [Number(await pointerOf('small')), Number(await pointerOf('small_ref'))];
  const series = (
    await db.query<{ item_id: string; store_id: string }>('SELECT item_id, store_id FROM series')
  ).rows;
  const got = await redis.mgetBuffer(series.map((x) => layout.series('small', vs, x.store_id, x.item_id)));
  const want = await redis.mgetBuffer(
    series.map((x) => layout.series('small_ref', vr, x.store_id, x.item_id)),
  );
  // Every series is published but the new one before its first sale (day 1).
  expect(got.filter((b) => b !== null && b.byteLength > 0).length, `day ${k}`).toBe(k === 1 ? 17 : 18);
  got.forEach((b, i) => {
    const what = `day ${k}: ${series[i]!.store_id}/${series[i]!.item_id}`;
    if (b === null) expect(want[i], what).toBeNull();
    else expect(b.equals(want[i]!), what).toBe(true);
  });
}

test('one more day of sales at a time, 5 days running: the refresh equals a full rebuild cell for cell', async () => {
  const { db, schema } = t();
  const first = await spawnLarder(['run', '--cutoff', 'latest'], env).done;
  expect(first.code, first.output).toBe(0);
  expect(first.output).toContain('full build (no earlier snapshot of the set)');

  const config = parseConfig({ ...rawConfig, database: { url: env.databaseUrl, schema } }, 'test');
  const zeroItem = (
    await db.query<{ item_id: string; store_id: string }>(
      'SELECT item_id, store_id FROM series ORDER BY series_id LIMIT 1',
    )
  ).rows[0]!;
  const newItem = (
    await db.query<{ item_id: string; store_id: string }>(
      'SELECT item_id, store_id FROM series ORDER BY series_id DESC LIMIT 1',
    )
  ).rows[0]!;
  for (let k = 1; k <= 5; k++) {
    const day = formatDay(parseDay(LAST)! + k);
    const file = join(watch, `sales_${day}.csv`);
    await writeSalesCsv(db, day, file, (item, store) =>
      item === zeroItem.item_id && store === zeroItem.store_id && k <= 2 ? 0 : undefined,
    );
    if (k === 1) {
      const line = `${newItem.item_id},${newItem.store_id},`;
      const kept = readFileSync(file, 'utf8')
        .split('\n')
        .filter((l) => !l.startsWith(line));
      writeFileSync(file, kept.join('\n'));
    }
    if (k === 3) {
      // A vector of the current version is gone (evicted, say): the publish reads that series whole.
      const key = (await redis.keys(`${schema}:{small:${await pointerOf('small')}:*}:s:*`)).sort()[0]!;
      await redis.del(key);
    }
    if (k === 4) {
      // The current version was published from another snapshot of the same cutoff (one built
      // again since, say): its vectors may hold other values, so nothing is carried over.
      const key = `${schema}:{small:${await pointerOf('small')}}:manifest`;
      const m = JSON.parse((await redis.get(key))!);
      await redis.set(key, JSON.stringify({ ...m, snapshotId: m.snapshotId + 1000 }));
    }
    if (k === 5) {
      // The pointer names the version of an older cutoff (the previous day's publish did not
      // happen): nothing is carried over from it either.
      const v = Number(await pointerOf('small'));
      await redis.set(`${schema}:{small}:current`, String(v - 1));
    }
    const r = await spawnLarder(['run', '--cutoff', 'latest'], env).done;
    const why = await db.query<{ message: string }>(`SELECT message FROM findings WHERE severity = 'block'`);
    expect(r.code, `${r.output}\n${why.rows.map((x) => x.message).join('\n')}`).toBe(0);
    expect(r.output).toContain(`loading sales_${day}.csv`);
    expect(r.output).toContain(`refreshed from ${formatDay(parseDay(day)! - 1)}`);
    const step = (
      await db.query<{ details: { mode: string; computedRows: number; stockout: string } }>(
        `SELECT details FROM run_steps WHERE name = 'build' ORDER BY step_id DESC LIMIT 1`,
      )
    ).rows[0]!.details;
    expect(step.mode).toBe('incremental');
    // The stock-out rule resumed from the previous snapshot's states: only the newest days read.
    expect(step.stockout).toBe('tail');
    // 18 series, one new training row each. The first new day (2024-04-20, a Saturday) starts a
    // retail week: the price boundary takes in a new week, so all H = 7 prediction rows are
    // computed again. On the other days the previous prediction rows are kept (their boundaries
    // and the price rows they read are the same) and only the newest one is computed.
    // The new series has no row before its first sale on day 2, then one training row and all
    // H prediction rows.
    const computed = k === 1 ? 17 * 8 : k === 2 ? 17 * 2 + 1 + 7 : 18 * 2;
    expect(step.computedRows, `day ${k} (${day})`).toBe(computed);

    await buildSnapshot(db, config, { set: 'small_ref', cutoff: day });
    await expectPublishedLikeReference(db, config, day, k);
    const refreshed = await snapshotChecksum(db, 'small', day);
    const full = await snapshotChecksum(db, 'small_ref', day);
    expect(refreshed, `day ${k} (${day})`).toEqual(full);
    const catalogue = (
      await db.query<{
        set_name: string;
        row_count: number;
        train_rows: number;
        predict_rows: number;
        data_fingerprint: string;
      }>(
        `SELECT set_name, row_count, train_rows, predict_rows, data_fingerprint FROM snapshots WHERE cutoff = $1 ORDER BY set_name`,
        [day],
      )
    ).rows;
    expect(catalogue[0]!.row_count).toBe(catalogue[1]!.row_count);
    expect(catalogue[0]!.train_rows).toBe(catalogue[1]!.train_rows);
    expect(catalogue[0]!.predict_rows).toBe(catalogue[1]!.predict_rows);
    expect(catalogue[0]!.data_fingerprint).toBe(catalogue[1]!.data_fingerprint);
  }
  // The refresh advanced the one table: the earlier cutoffs of `small` are gone from the catalogue.
  const smalls = (await db.query<{ cutoff: string }>(`SELECT cutoff FROM snapshots WHERE set_name = 'small'`))
    .rows;
  expect(smalls.map((s) => s.cutoff)).toEqual([formatDay(parseDay(LAST)! + 5)]);
});

test('a change to older data makes the next run build in full, to the same cells as the reference', async () => {
  const { db, schema } = t();
  const last = formatDay(parseDay(LAST)! + 5);
  const next = formatDay(parseDay(last)! + 1);
  // A late correction of a day the previous snapshot already saw.
  await db.query(`UPDATE sales SET units = units + 1 WHERE day = $1::date - 20`, [last]);
  await writeSalesCsv(db, next, join(watch, `sales_${next}.csv`));
  const r = await spawnLarder(['run', '--cutoff', 'latest'], env).done;
  expect(r.code, r.output).toBe(0);
  // The UPDATE ran outside the loader: the change log knows a statement touched sales, not where.
  expect(r.output).toContain(
    `full build (data inside the boundaries of the snapshot of ${last} changed since it was built: sales changed outside the loader)`,
  );
  const config = parseConfig({ ...rawConfig, database: { url: env.databaseUrl, schema } }, 'test');
  await buildSnapshot(db, config, { set: 'small_ref', cutoff: next });
  expect(await snapshotChecksum(db, 'small', next)).toEqual(await snapshotChecksum(db, 'small_ref', next));
});

test('a refresh whose partitions fail rolls back the deletes its finish began beside them, and resumes to the same cells', async () => {
  const { db, schema } = t();
  const last = formatDay(parseDay(LAST)! + 6);
  const next = formatDay(parseDay(last)! + 1);
  const table = (
    await db.query<{ table_name: string }>(
      `SELECT table_name FROM snapshots WHERE set_name = 'small' AND cutoff = $1`,
      [last],
    )
  ).rows[0]!.table_name;
  const catalogue = async () =>
    (
      await db.query<{ snapshot_id: number; cutoff: string; row_count: number }>(
        `SELECT snapshot_id, cutoff, row_count FROM snapshots WHERE set_name = 'small' ORDER BY cutoff`,
      )
    ).rows;
  const listed = await catalogue();
  const before = await snapshotChecksum(db, 'small', last);
  await writeSalesCsv(db, next, join(watch, `sales_${next}.csv`));
  // A series without its stock-out state: every attempt at its store's partition fails, after
  // the finish has already deleted the rows the new day retires.
  await db.query(
    'CREATE TABLE saved_state AS SELECT * FROM stockout_states WHERE table_name = $1 AND series_id = (SELECT min(series_id) FROM series)',
    [table],
  );
  await db.query(
    'DELETE FROM stockout_states WHERE table_name = $1 AND series_id = (SELECT min(series_id) FROM series)',
    [table],
  );
  const failed = await spawnLarder(['run', '--cutoff', 'latest'], env).done;
  expect(failed.code, failed.output).toBe(1);
  expect(failed.output).toContain('has no stock-out state');
  // Nothing of the refresh is visible: the catalogue and every cell are as before it.
  expect(await catalogue()).toEqual(listed);
  expect(await snapshotChecksum(db, 'small', last)).toEqual(before);

  await db.exec('INSERT INTO stockout_states SELECT * FROM saved_state; DROP TABLE saved_state');
  const resumed = await spawnLarder(['run', '--cutoff', 'latest'], env).done;
  expect(resumed.code, resumed.output).toBe(0);
  expect(resumed.output).toContain(`refreshed from ${last}`);
  const config = parseConfig({ ...rawConfig, database: { url: env.databaseUrl, schema } }, 'test');
  await buildSnapshot(db, config, { set: 'small_ref', cutoff: next });
  expect(await snapshotChecksum(db, 'small', next)).toEqual(await snapshotChecksum(db, 'small_ref', next));
});
