import type { AddressInfo } from 'node:net';
import { setTimeout as sleep } from 'node:timers/promises';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parseConfig } from '../../src/config/config.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import { buildServer } from '../../src/serve/http-server.js';
import { createMetrics } from '../../src/serve/metrics.js';
import { createReader, type Reader } from '../../src/serve/reader.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { RedisProcess } from '../helpers/redis-process.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

const prefix = schemaFor(import.meta.url);
const env = useTestDb(import.meta.url, { redis: { prefix } });
const TOKEN = 'fallback-test-token-0123456789';
let redis: RedisProcess;
let fx: SnapshotFixture;
let reader: Reader;
let app: FastifyInstance;
let base: string;
const metrics = createMetrics();

beforeAll(async () => {
  // Its own server, so the test can kill it; the append-only file (fsync on every write) keeps
  // the published keys across the crash, as a production Redis with persistence would.
  redis = await RedisProcess.start(['--appendonly', 'yes', '--appendfsync', 'always']);
  fx = await createSnapshotFixture(env().db, { cutoff: '2024-07-07', seed: 5, stores: 2, itemsPerStore: 30 });
  const config = parseConfig(
    {
      database: { schema: env().schema },
      redis: { prefix, url: redis.url },
      serve: { tokens: [TOKEN], redisTimeoutMs: 100, pointerCacheMs: 0 },
    },
    'test',
  );
  const publisher = createRedisCache({ url: redis.url, commandTimeoutMs: 10_000 });
  await publishSnapshot(env().db, publisher, config, { set: 'daily', cutoff: fx.cutoff });
  await publisher.close();
  reader = await createReader({ config, db: env().db, events: metrics.readerEvents });
  app = buildServer({ reader, config, metrics });
  await app.listen({ port: 0, host: '127.0.0.1' });
  base = `http://127.0.0.1:${(app.server.address() as AddressInfo).port}`;
});

afterAll(async () => {
  await app?.close();
  await reader?.close();
  await redis?.stop();
});

const auth = { authorization: `Bearer ${TOKEN}` };
async function getFeatures(item: string, store: string, day?: string) {
  const q = new URLSearchParams({ item, store, ...(day ? { day } : {}) });
  const res = await fetch(`${base}/v1/sets/daily/features?${q}`, { headers: auth });
  return { status: res.status, body: (await res.json()) as Record<string, unknown> };
}

async function metricValue(name: string, label = ''): Promise<number> {
  const text = await metrics.registry.metrics();
  const line = text
    .split('\n')
    .find((l) => l.startsWith(`${name}${label} `) || l.startsWith(`${name}${label}{`));
  return line ? Number(line.split(' ').at(-1)) : 0;
}

describe('Redis stopped and restarted', () => {
  it('reads fall back to PostgreSQL with the same values, and come back to the cache after a restart', async () => {
    const s = fx.series[7]!;
    const cached = await getFeatures(s.item, s.store);
    expect(cached.status).toBe(200);
    expect(cached.body.source).toBe('cache');

    await redis.kill();
    const t0 = performance.now();
    const down = await getFeatures(s.item, s.store);
    expect(down.status).toBe(200);
    expect(down.body.source).toBe('fallback');
    // Same values either way: the fallback rounds to Float32 as the cache stores them.
    expect(down.body.rows).toEqual(cached.body.rows);
    expect(down.body.version).toBe(cached.body.version);
    expect(down.body.cutoff).toBe(fx.cutoff);
    // A batch too, in one set-based query.
    const batch = await fetch(`${base}/v1/sets/daily/features/batch`, {
      method: 'POST',
      headers: { ...auth, 'content-type': 'application/json' },
      body: JSON.stringify({
        series: fx.series.slice(0, 25).map((x) => ({ item: x.item, store: x.store, day: '2024-07-09' })),
      }),
    });
    const bb = (await batch.json()) as { results: { source: string; rows: unknown[] }[] };
    expect(batch.status).toBe(200);
    expect(bb.results).toHaveLength(25);
    expect(bb.results.every((r) => r.source === 'fallback' && r.rows.length === 1)).toBe(true);
    // Not stuck behind a timeout per request while Redis is away (generous bound for a shared machine).
    expect(performance.now() - t0).toBeLessThan(5000);
    expect(await metricValue('larder_fallbacks_total', '{reason="unavailable"}')).toBeGreaterThanOrEqual(26);
    const health = (await (await fetch(`${base}/health`)).json()) as { cache: string };
    expect(health.cache).toBe('unavailable');
    const info = await fetch(`${base}/v1/sets/daily`, { headers: auth });
    expect(((await info.json()) as { source: string }).source).toBe('fallback');

    await redis.restart();
    const end = Date.now() + 15_000;
    while (!reader.cacheReady() && Date.now() < end) await sleep(50);
    expect(reader.cacheReady()).toBe(true);
    const back = await getFeatures(s.item, s.store);
    expect(back.body.source).toBe('cache');
    expect(back.body.rows).toEqual(cached.body.rows);
    expect(await metricValue('larder_cache_hits_total')).toBeGreaterThanOrEqual(2);
  });
});
