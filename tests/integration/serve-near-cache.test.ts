import { setTimeout as sleep } from 'node:timers/promises';
import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { KeyLayout } from '../../src/publish/layout.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import { createMetrics } from '../../src/serve/metrics.js';
import { createReader, type Reader } from '../../src/serve/reader.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { redisServerUrl } from '../helpers/servers.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

// The reader's in-process copies against the reference, the snapshot tables: a copy is served
// only for the version the pointer names, and a switch is seen as soon as the pointer is read.
const prefix = schemaFor(import.meta.url);
const env = useTestDb(import.meta.url, { redis: { prefix } });
const layout = new KeyLayout(prefix);
let raw: Redis;
let cache: FeatureCache;
const fx: SnapshotFixture[] = [];
const readers: Reader[] = [];

beforeAll(async () => {
  const url = await redisServerUrl();
  raw = new Redis(url);
  cache = createRedisCache({ url, commandTimeoutMs: 10_000 });
  await cache.waitReady(5000);
  for (const [i, cutoff] of ['2024-05-05', '2024-05-12'].entries()) {
    fx.push(await createSnapshotFixture(env().db, { cutoff, seed: 70 + i, stores: 2, itemsPerStore: 20 }));
  }
});

afterAll(async () => {
  for (const r of readers) await r.close();
  const keys = await raw.keys(`${prefix}:*`);
  if (keys.length) await raw.del(...keys);
  raw.disconnect();
  await cache?.close();
});

/** A reader whose copies fill read by read unless `warm` (the background load of a whole version). */
async function open(pointerCacheMs: number, nearCacheBytes?: number, warm = false) {
  const metrics = createMetrics();
  const reader = await createReader({
    config: env().config,
    cache,
    db: env().db,
    pointerCacheMs,
    warmNearCache: warm,
    events: metrics.readerEvents,
    ...(nearCacheBytes === undefined ? {} : { nearCacheBytes }),
  });
  readers.push(reader);
  const count = async (name: string) => {
    const line = (await metrics.registry.metrics()).split('\n').find((l) => l.startsWith(`${name} `));
    return Number(line?.split(' ')[1] ?? 0);
  };
  return { reader, count };
}

/** A series' first feature on its first served day, from the snapshot table (float4 as cached). */
async function firstCell(f: SnapshotFixture, item: string, store: string) {
  const { rows } = await env().db.query<{ v: number | null }>(
    `SELECT t.${f.columns[0]}::float4 AS v FROM ${f.tableName} t JOIN series s USING (series_id)
     WHERE s.item_id = $1 AND s.store_id = $2 AND t.is_predict ORDER BY t.day LIMIT 1`,
    [item, store],
  );
  const v = rows[0]!.v;
  return v === null ? null : Math.fround(Number(v));
}

describe('in-process copies of the current version', () => {
  it('answer a repeated read without Redis, and count as cache hits', async () => {
    const { db, config } = env();
    const pub = await publishSnapshot(db, cache, config, { set: 'daily', cutoff: fx[0]!.cutoff });
    const { reader, count } = await open(0);
    const s = fx[0]!.series[3]!;
    const first = await reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(first).toMatchObject({ source: 'cache', version: pub.version });
    // The key is gone from Redis, the pointer still names the version: the copy answers.
    await raw.del(layout.series('daily', pub.version, s.store, s.item));
    const again = await reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(again).toEqual(first);
    expect(again.rows[0]!.features[fx[0]!.columns[0]!]).toBe(await firstCell(fx[0]!, s.item, s.store));
    expect(await count('larder_cache_hits_total')).toBe(2);
    expect(await count('larder_near_cache_hits_total')).toBe(1);
    expect(await count('larder_cache_misses_total')).toBe(0);
    // Without copies the same read is a miss answered by PostgreSQL.
    const plain = await open(0, 0);
    const miss = await plain.reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(miss.source).toBe('fallback');
    expect(await plain.count('larder_cache_misses_total')).toBe(1);
  });

  it('are dropped when the pointer names another version: reads give the new one, never a mix', async () => {
    const { db, config } = env();
    const { reader, count } = await open(0);
    const reqs = fx[0]!.series.map((s) => ({ set: 'daily', item: s.item, store: s.store }));
    const before = await reader.getMany(reqs);
    const v0 = before[0]!.version;
    expect(new Set(before.map((r) => r.version))).toEqual(new Set([v0]));
    const pub = await publishSnapshot(db, cache, config, { set: 'daily', cutoff: fx[1]!.cutoff });
    expect(pub.version).toBeGreaterThan(v0);
    // The old version's keys are still in Redis for the grace period, and its copies in process.
    const s = fx[0]!.series[5]!;
    expect(await raw.exists(layout.series('daily', v0, s.store, s.item))).toBe(1);
    const near0 = await count('larder_near_cache_hits_total');
    const after = await reader.getMany(reqs);
    expect(after.every((r) => r.version === pub.version && r.cutoff === fx[1]!.cutoff)).toBe(true);
    expect(await count('larder_near_cache_hits_total')).toBe(near0);
    for (const r of after.slice(0, 8)) {
      expect(r.rows[0]!.features[fx[1]!.columns[0]!]).toBe(await firstCell(fx[1]!, r.item, r.store));
    }
    // Now the new version's copies answer, and only for it.
    const third = await reader.getMany(reqs);
    expect(third).toEqual(after);
    expect((await count('larder_near_cache_hits_total')) - near0).toBe(reqs.length);
  });

  it('are loaded whole in the background after a first read, and again after a switch', async () => {
    const { db, config } = env();
    const reqs = fx[0]!.series.map((s) => ({ set: 'daily', item: s.item, store: s.store }));
    const { reader, count } = await open(0, undefined, true);
    /**
     * Reads series never read before, one at a time, until one comes from the copies: only the
     * background load can have put it there. Returns the requests still unread.
     */
    const waitForLoad = async (unread: typeof reqs) => {
      for (let k = 0; k < unread.length; k++) {
        const before = await count('larder_near_cache_hits_total');
        await reader.get(unread[k]!);
        if ((await count('larder_near_cache_hits_total')) - before === 1) return unread.slice(k + 1);
        await sleep(20);
      }
      throw new Error('no series was loaded in the background');
    };
    for (const [f, cutoff] of [fx[0]!, fx[1]!].map((x) => [x, x.cutoff] as const)) {
      const pub = await publishSnapshot(db, cache, config, { set: 'daily', cutoff });
      const first = await reader.get(reqs[0]!);
      expect(first.version).toBe(pub.version);
      const unread = await waitForLoad(reqs.slice(1));
      expect(unread.length).toBeGreaterThan(10);
      await sleep(100); // the last batches of the load
      // Every series key of the version gone from Redis: the copies answer every unread series.
      for (const r of reqs) await raw.del(layout.series('daily', pub.version, r.store, r.item));
      const hits = await count('larder_near_cache_hits_total');
      const got = await reader.getMany(unread);
      expect((await count('larder_near_cache_hits_total')) - hits).toBe(unread.length);
      expect(got.every((r) => r.version === pub.version && r.cutoff === cutoff && r.source === 'cache')).toBe(
        true,
      );
      for (const r of got.slice(0, 8))
        expect(r.rows[0]!.features[f.columns[0]!]).toBe(await firstCell(f, r.item, r.store));
    }
    // The next test reads through Redis: a current version with its keys.
    await publishSnapshot(db, cache, config, { set: 'daily', cutoff: fx[1]!.cutoff });
  });

  it('are not used when Redis is away, even with the pointer still trusted: the fallback answers', async () => {
    const own = createRedisCache({ url: await redisServerUrl(), commandTimeoutMs: 10_000 });
    await own.waitReady(5000);
    const metrics = createMetrics();
    const reader = await createReader({
      config: env().config,
      cache: own,
      db: env().db,
      pointerCacheMs: 60_000,
      warmNearCache: false,
      events: metrics.readerEvents,
    });
    readers.push(reader);
    const s = fx[1]!.series[0]!;
    const cached = await reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(cached.source).toBe('cache');
    await own.close();
    // Once the client knows it is disconnected (what a reader sees when Redis goes away).
    while (own.ready()) await sleep(5);
    const down = await reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(down.source).toBe('fallback');
    expect(down.rows).toEqual(cached.rows);
    expect(await metrics.registry.metrics()).toMatch(/^larder_fallbacks_total\{reason="unavailable"\} 1$/m);
  });
});
