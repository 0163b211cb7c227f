import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { KeyLayout } from '../../src/publish/layout.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import { createReader, type Reader } from '../../src/serve/reader.js';
import { cacheScript, SCRIPT_ANSWERS } from '../helpers/cache-script.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { RedisClusterProcess } from '../helpers/redis-process.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

const prefix = schemaFor(import.meta.url);
const env = useTestDb(import.meta.url, { redis: { prefix } });
const layout = new KeyLayout(prefix);
let cluster: RedisClusterProcess;
let cache: FeatureCache;
let reader: Reader;
let a: SnapshotFixture;
let b: SnapshotFixture;

beforeAll(async () => {
  cluster = await RedisClusterProcess.start(3);
  cache = createRedisCache({ url: cluster.url, commandTimeoutMs: 10_000 });
  expect(await cache.waitReady(10_000)).toBe(true);
  a = await createSnapshotFixture(env().db, { cutoff: '2024-09-01', seed: 21, stores: 6, itemsPerStore: 25 });
  b = await createSnapshotFixture(env().db, { cutoff: '2024-09-08', seed: 22, stores: 6, itemsPerStore: 25 });
  // No in-process copies: the fallback test below deletes a key the reader has just read.
  reader = await createReader({
    config: env().config,
    cache,
    db: env().db,
    pointerCacheMs: 0,
    nearCacheBytes: 0,
  });
});

afterAll(async () => {
  await reader?.close();
  await cache?.close();
  await cluster?.stop();
});

/** Which master holds each key, asked of the cluster itself (CLUSTER KEYSLOT, then CLUSTER SLOTS). */
async function ownersOf(keys: string[]): Promise<number[]> {
  const node = new Redis(cluster.nodes[0]!.port, '127.0.0.1');
  try {
    const slots = (await node.call('CLUSTER', 'SLOTS')) as [number, number, [string, number]][];
    return await Promise.all(
      keys.map(async (k) => {
        const slot = Number(await node.call('CLUSTER', 'KEYSLOT', k));
        const range = slots.find(([lo, hi]) => slot >= lo && slot <= hi);
        if (!range) throw new Error(`no owner for slot ${slot}`);
        return range[2][1];
      }),
    );
  } finally {
    node.disconnect();
  }
}

describe('Redis Cluster (three masters)', () => {
  it('answers the cache operations as a single Redis does, multi-key commands split by slot', async () => {
    expect(await cacheScript(cache, prefix)).toEqual(SCRIPT_ANSWERS);
  });

  it('publishes across the masters, each store on one slot, and reads back through the Cluster client', async () => {
    expect(cache.kind).toBe('cluster');
    const res = await publishSnapshot(env().db, cache, env().config, { set: 'daily', cutoff: a.cutoff });
    expect(res.keys).toBe(150);
    const owners = new Set<number>();
    for (const store of new Set(a.series.map((s) => s.store))) {
      const keys = a.series
        .filter((s) => s.store === store)
        .map((s) => layout.series('daily', res.version, store, s.item));
      const storeOwners = new Set(await ownersOf(keys));
      expect(storeOwners.size, store).toBe(1);
      owners.add([...storeOwners][0]!);
    }
    // Six stores over three masters: the tags spread them over more than one node.
    expect(owners.size).toBeGreaterThan(1);
    const reads = await reader.getMany(a.series.map((s) => ({ set: 'daily', item: s.item, store: s.store })));
    expect(
      reads.every((r) => r.source === 'cache' && r.version === res.version && r.rows.length === 28),
    ).toBe(true);
    let n = 0;
    for await (const batch of reader.readAll({ set: 'daily', batchSize: 10 })) n += batch.items.length;
    expect(n).toBe(150);
  });

  it('switches to a new version and reads it; values equal the fallback answer', async () => {
    const res = await publishSnapshot(env().db, cache, env().config, {
      set: 'daily',
      cutoff: b.cutoff,
      graceSeconds: 5,
    });
    const s = b.series[33]!;
    const r = await reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(r).toMatchObject({ source: 'cache', version: res.version, cutoff: b.cutoff });
    // The same series through PostgreSQL (its key removed from the cluster).
    await cache.deleteMany([layout.series('daily', res.version, s.store, s.item)]);
    const f = await reader.get({ set: 'daily', item: s.item, store: s.store });
    expect(f.source).toBe('fallback');
    expect(f.rows).toEqual(r.rows);
  });
});
