import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parseConfig } from '../../src/config/config.js';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { KeyLayout } from '../../src/publish/layout.js';
import { createMemoryCache } from '../../src/publish/memory-cache.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import { createReader, type Reader } from '../../src/serve/reader.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { redisServerUrl } from '../helpers/servers.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

const prefix = schemaFor(import.meta.url);
const env = useTestDb(import.meta.url, { redis: { prefix } });
let raw: Redis;
let cache: FeatureCache;
let a: SnapshotFixture;
let b: SnapshotFixture;
const layout = new KeyLayout(prefix);

beforeAll(async () => {
  const url = await redisServerUrl();
  raw = new Redis(url);
  cache = createRedisCache({ url, commandTimeoutMs: 10_000 });
  await cache.waitReady(5000);
  a = await createSnapshotFixture(env().db, { cutoff: '2024-03-31', seed: 11, stores: 3, itemsPerStore: 40 });
  b = await createSnapshotFixture(env().db, { cutoff: '2024-04-07', seed: 12, stores: 3, itemsPerStore: 40 });
});

afterAll(async () => {
  const keys = await raw.keys(`${prefix}:*`);
  if (keys.length) await raw.del(...keys);
  raw.disconnect();
  await cache?.close();
});

/**
 * The snapshot's prediction rows with every feature cast to float4 by PostgreSQL (IEEE 754
 * round-to-nearest), the reference the packed vectors must equal; NULL stays null.
 */
async function expectedVectors(f: SnapshotFixture): Promise<Map<string, (number | null)[]>> {
  const cols = f.columns.map((c) => `t.${c}::float4 AS ${c}`).join(', ');
  const { rows } = await env().db.query<Record<string, string | number | null>>(
    `SELECT s.item_id, s.store_id, ${cols} FROM ${f.tableName} t JOIN series s USING (series_id)
     WHERE t.is_predict ORDER BY s.store_id, s.item_id, t.day`,
  );
  const out = new Map<string, (number | null)[]>();
  for (const r of rows) {
    const k = `${r.store_id}|${r.item_id}`;
    const v = out.get(k) ?? [];
    for (const c of f.columns) v.push(r[c] === null ? null : Math.fround(Number(r[c])));
    out.set(k, v);
  }
  return out;
}

/** Reads a version's vectors straight from Redis and unpacks them with DataView (not our codec). */
async function publishedVectors(
  f: SnapshotFixture,
  version: number,
): Promise<Map<string, (number | null)[]>> {
  const out = new Map<string, (number | null)[]>();
  for (const s of f.series) {
    const buf = await raw.getBuffer(layout.series(f.set, version, s.store, s.item));
    expect(buf, `${s.store}/${s.item}`).not.toBeNull();
    const dv = new DataView(buf!.buffer, buf!.byteOffset, buf!.byteLength);
    const v: (number | null)[] = [];
    for (let i = 0; i < buf!.byteLength / 4; i++) {
      const x = dv.getFloat32(i * 4, true);
      v.push(Number.isNaN(x) ? null : x);
    }
    out.set(`${s.store}|${s.item}`, v);
  }
  return out;
}

describe('publishSnapshot to Redis', () => {
  let first: Awaited<ReturnType<typeof publishSnapshot>>;

  it('writes every series vector equal to the snapshot table, and switches the pointer', async () => {
    first = await publishSnapshot(env().db, cache, env().config, { set: 'daily', cutoff: a.cutoff });
    expect(first.keys).toBe(a.series.length);
    expect(first.previous).toBeNull();
    expect(await raw.get(layout.pointer('daily'))).toBe(String(first.version));
    const expected = await expectedVectors(a);
    const got = await publishedVectors(a, first.version);
    expect(got.size).toBe(expected.size);
    for (const [k, v] of expected) expect(got.get(k), k).toEqual(v);
    // The current version has no expiry: it stays until the next publish replaces it.
    expect(await raw.ttl(layout.series('daily', first.version, a.series[0]!.store, a.series[0]!.item))).toBe(
      -1,
    );
    const manifest = JSON.parse((await raw.get(layout.manifest('daily', first.version)))!);
    expect(manifest).toMatchObject({ set: 'daily', cutoff: a.cutoff, horizon: 28, series: a.series.length });
    expect(manifest.columns.map((c: { name: string }) => c.name)).toEqual(a.columns);
    // The prediction rows got their partial index (the fallback's lookups use it).
    const idx = await env().db.query<{ indexdef: string }>(
      'SELECT indexdef FROM pg_indexes WHERE schemaname = current_schema() AND tablename = $1',
      [a.tableName],
    );
    expect(idx.rows.map((r) => r.indexdef).join('\n')).toMatch(/\(series_id, day\) WHERE is_predict/);
    const pub = await env().db.query<{ status: string; keys: number; version: number }>(
      'SELECT status, keys, version FROM publishes WHERE publish_id = $1',
      [first.publishId],
    );
    expect(pub.rows[0]).toEqual({ status: 'done', keys: a.series.length, version: first.version });
  });

  it('a later publish switches versions and gives the old one the grace expiry', async () => {
    const second = await publishSnapshot(env().db, cache, env().config, {
      set: 'daily',
      cutoff: b.cutoff,
      graceSeconds: 30,
    });
    expect(second.version).toBe(first.version + 1);
    expect(second.previous).toBe(first.version);
    expect(await raw.get(layout.pointer('daily'))).toBe(String(second.version));
    const s0 = a.series[0]!;
    const ttl = await raw.ttl(layout.series('daily', first.version, s0.store, s0.item));
    expect(ttl).toBeGreaterThan(0);
    expect(ttl).toBeLessThanOrEqual(30);
    expect(await raw.ttl(layout.manifest('daily', first.version))).toBeLessThanOrEqual(30);
    const expected = await expectedVectors(b);
    const got = await publishedVectors(b, second.version);
    for (const [k, v] of expected) expect(got.get(k), k).toEqual(v);
  });

  it('refuses an unknown cutoff naming the built ones, leaving the pointer alone', async () => {
    const before = await raw.get(layout.pointer('daily'));
    await expect(
      publishSnapshot(env().db, cache, env().config, { set: 'daily', cutoff: '2024-05-01' }),
    ).rejects.toThrow(
      /no snapshot of set 'daily' for cutoff 2024-05-01 \(built cutoffs: 2024-04-07, 2024-03-31\)/,
    );
    await expect(
      publishSnapshot(env().db, cache, env().config, { set: 'daily', cutoff: '2024-02-30' }),
    ).rejects.toThrow(/cutoff '2024-02-30' is not a valid day/);
    await expect(
      publishSnapshot(env().db, cache, env().config, { set: 'Daily', cutoff: a.cutoff }),
    ).rejects.toThrow(/set name 'Daily' is not a safe SQL identifier/);
    expect(await raw.get(layout.pointer('daily'))).toBe(before);
  });

  it('refuses a snapshot whose series lacks prediction rows; the current version stays', async () => {
    const { db } = env();
    const before = await raw.get(layout.pointer('daily'));
    const broken = await createSnapshotFixture(db, {
      set: 'daily',
      cutoff: '2024-04-14',
      seed: 13,
      stores: 2,
      itemsPerStore: 5,
    });
    await db.query(`DELETE FROM ${broken.tableName} WHERE series_id = $1 AND day = '2024-04-20'`, [
      broken.series[3]!.id,
    ]);
    await expect(
      publishSnapshot(db, cache, env().config, { set: 'daily', cutoff: '2024-04-14' }),
    ).rejects.toThrow(/1 series lack prediction rows \(series \d+ has 27 of 28\)/);
    expect(await raw.get(layout.pointer('daily'))).toBe(before);
    const last = await db.query<{ status: string; message: string }>(
      'SELECT status, message FROM publishes ORDER BY publish_id DESC LIMIT 1',
    );
    expect(last.rows[0]?.status).toBe('failed');
    // What the failed publish wrote is left to expire (the pending expiry), never made current.
    const v = Number(before) + 1;
    const ttl = await raw.pttl(layout.series('daily', v, broken.series[0]!.store, broken.series[0]!.item));
    expect(ttl).toBeGreaterThan(0);
  });
});

describe('a bad row in the middle of the stream', () => {
  it('fails the publish naming the row, records the failure on the same connection, keeps the pointer', async () => {
    const { db, config } = env();
    const before = await raw.get(layout.pointer('daily'));
    const f = await createSnapshotFixture(db, {
      cutoff: '2024-04-21',
      seed: 14,
      stores: 4,
      itemsPerStore: 100,
    });
    const bad = f.series[0]!;
    // Rewrite the table with one row of the first series moved past the horizon, placed first,
    // so the publisher meets it with most of the COPY still to come.
    const cols = ['series_id', 'day', 'origin', 'is_predict', 'label', ...f.columns].join(', ');
    await db.exec(`CREATE TABLE moved AS SELECT * FROM ${f.tableName}; TRUNCATE ${f.tableName}`);
    await db.query(
      `INSERT INTO ${f.tableName} (${cols})
       SELECT series_id, CASE WHEN series_id = $1 AND day = '2024-04-22' THEN day + 60 ELSE day END, origin,
         is_predict, label, ${f.columns.join(', ')}
       FROM moved ORDER BY (series_id = $1 AND day = '2024-04-22') DESC, series_id, day`,
      [bad.id],
    );
    await db.exec('DROP TABLE moved');
    await expect(publishSnapshot(db, cache, config, { set: 'daily', cutoff: '2024-04-21' })).rejects.toThrow(
      `series ${bad.id} has a prediction row for 2024-06-21, outside 2024-04-22 .. 2024-05-19`,
    );
    expect(await raw.get(layout.pointer('daily'))).toBe(before);
    const last = await db.query<{ status: string; message: string }>(
      'SELECT status, message FROM publishes ORDER BY publish_id DESC LIMIT 1',
    );
    expect(last.rows[0]).toMatchObject({
      status: 'failed',
      message: expect.stringContaining('outside 2024-04-22'),
    });
  });
});

describe('reader over the published set', () => {
  let reader: Reader;
  beforeAll(async () => {
    // Copies fill read by read only: a test below removes a key and expects the fallback.
    reader = await createReader({
      config: env().config,
      cache,
      db: env().db,
      pointerCacheMs: 0,
      warmNearCache: false,
    });
  });
  afterAll(async () => reader?.close());

  it('get returns named features of every served day, equal to the snapshot', async () => {
    const expected = await expectedVectors(b);
    const s = b.series[5]!;
    const r = await reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(r.source).toBe('cache');
    expect(r.cutoff).toBe(b.cutoff);
    expect(r.rows).toHaveLength(28);
    expect(r.rows[0]!.day).toBe('2024-04-08');
    expect(r.rows[27]!.day).toBe('2024-05-05');
    const flat = r.rows.flatMap((row) => b.columns.map((c) => row.features[c]));
    expect(flat).toEqual(expected.get(`${s.store}|${s.item}`));
    const one = await reader.get({ set: 'daily', item: s.item, store: s.store, day: '2024-04-10' });
    expect(one.rows).toEqual([r.rows[2]]);
  });

  it('getMany keeps request order across stores; readAll yields every series once', async () => {
    const picks = [b.series[70]!, b.series[1]!, b.series[44]!];
    const reads = await reader.getMany(picks.map((s) => ({ set: 'daily', item: s.item, store: s.store })));
    expect(reads.map((r) => `${r.store}|${r.item}`)).toEqual(picks.map((s) => `${s.store}|${s.item}`));
    const expected = await expectedVectors(b);
    const seen = new Set<string>();
    for await (const batch of reader.readAll({ set: 'daily', batchSize: 16 })) {
      expect(batch.cutoff).toBe(b.cutoff);
      const stride = batch.horizon * batch.columns.length;
      batch.items.forEach((item, i) => {
        const k = `${batch.stores[i]}|${item}`;
        seen.add(k);
        const v = Array.from(batch.values.subarray(i * stride, (i + 1) * stride), (x) =>
          Number.isNaN(x) ? null : x,
        );
        expect(v, k).toEqual(expected.get(k));
      });
    }
    expect(seen.size).toBe(b.series.length);
  });

  it('getVectors returns the matrices in request order, from the cache or PostgreSQL, NaN for unknown series', async () => {
    const expected = await expectedVectors(b);
    const picks = [b.series[9]!, { item: 'NOPE-9', store: 'ST-001' }, b.series[100]!, b.series[3]!];
    const version = Number(await raw.get(layout.pointer('daily')));
    // One of them only in PostgreSQL: its key removed from the cache.
    await raw.del(layout.series('daily', version, b.series[3]!.store, b.series[3]!.item));
    const v = await reader.getVectors('daily', picks);
    expect(v).toMatchObject({ set: 'daily', cutoff: b.cutoff, horizon: 28, firstDay: '2024-04-08', version });
    expect(v.columns).toEqual(b.columns);
    expect(v.sources).toEqual(['cache', null, 'cache', 'fallback']);
    const stride = 28 * b.columns.length;
    const at = (i: number) =>
      Array.from(v.values.subarray(i * stride, (i + 1) * stride), (x) => (Number.isNaN(x) ? null : x));
    expect(at(0)).toEqual(expected.get(`${b.series[9]!.store}|${b.series[9]!.item}`));
    expect(at(1).every((x) => x === null)).toBe(true);
    expect(at(2)).toEqual(expected.get(`${b.series[100]!.store}|${b.series[100]!.item}`));
    expect(at(3)).toEqual(expected.get(`${b.series[3]!.store}|${b.series[3]!.item}`));
  });

  it('rejects bad days and unknown series with clear messages', async () => {
    const s = b.series[0]!;
    await expect(
      reader.get({ set: 'daily', item: s.item, store: s.store, day: '2024-13-01' }),
    ).rejects.toThrow(/day '2024-13-01' is not a valid day/);
    await expect(
      reader.get({ set: 'daily', item: s.item, store: s.store, day: '2024-04-07' }),
    ).rejects.toThrow(
      /day 2024-04-07 is not served by set 'daily' \(version \d+\): days 2024-04-08 \.\. 2024-05-05/,
    );
    await expect(reader.get({ set: 'daily', item: 'NOPE-1', store: s.store })).rejects.toMatchObject({
      code: 'UNKNOWN_SERIES',
    });
    await expect(reader.get({ set: 'weekly', item: s.item, store: s.store })).rejects.toMatchObject({
      code: 'UNKNOWN_SET',
    });
    const mixed = await reader.getMany(
      [
        { set: 'daily', item: s.item, store: s.store },
        { set: 'daily', item: 'NOPE-2', store: s.store },
      ],
      { unknown: 'null' },
    );
    expect(mixed[0]?.source).toBe('cache');
    expect(mixed[1]).toBeNull();
  });
});

describe('in-process cache (no REDIS_URL)', () => {
  it('publishes and reads with the same results as Redis', async () => {
    const config = parseConfig({ redis: { prefix: `${prefix}m` } }, 'test');
    const mem = createMemoryCache(`${prefix}-mem`);
    const res = await publishSnapshot(env().db, mem, config, { set: 'daily', cutoff: b.cutoff });
    expect(res.keys).toBe(b.series.length);
    const reader = await createReader({ config, cache: mem, db: env().db });
    const fromRedis = await createReader({ config: env().config, cache, db: env().db });
    const s = b.series[17]!;
    const m = await reader.get({ set: 'daily', item: s.item, store: s.store });
    const r = await fromRedis.get({ set: 'daily', item: s.item, store: s.store });
    expect(m.source).toBe('cache');
    expect(m.rows).toEqual(r.rows);
    let n = 0;
    for await (const batch of reader.readAll({ set: 'daily' })) n += batch.items.length;
    expect(n).toBe(b.series.length);
  });
});
