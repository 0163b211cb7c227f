import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { createMemoryCache } from '../../src/publish/memory-cache.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import { cacheScript, scriptKeys } from '../helpers/cache-script.js';
import { schemaFor } from '../helpers/db.js';
import { redisServerUrl } from '../helpers/servers.js';

// The in-process cache must behave as Redis does: the same script of operations against a real
// Redis (the reference) and the in-process one gives the same answers.
const p = schemaFor(import.meta.url);
let redis: FeatureCache;
const memory = createMemoryCache(`${p}-mem`);

beforeAll(async () => {
  redis = createRedisCache({ url: await redisServerUrl(), commandTimeoutMs: 10_000 });
  expect(await redis.waitReady(5000)).toBe(true);
});
afterAll(async () => {
  await redis.deleteMany(scriptKeys(p));
  await redis.close();
});

describe('in-process cache against Redis', () => {
  it('answers the same script identically', async () => {
    const [want, got] = await Promise.all([cacheScript(redis, p), cacheScript(memory, p)]);
    expect(got).toEqual(want);
    expect(want).toEqual([
      ['010203', null, '7468726565'],
      ['two', 'three'],
      3,
      1,
      0,
      null,
      '1',
      1,
      2,
      null,
      2,
      null,
    ]);
  });

  it('puts a vector together on the server as the publisher would (splice)', async () => {
    const run = async (c: FeatureCache, tag: string) => {
      const k = (n: string) => `${p}:${tag}:${n}`;
      await c.setMany([
        [k('old'), Buffer.from([0, 1, 2, 3, 4, 5, 6, 7, 8, 9])],
        [k('short'), Buffer.from([0, 1, 2])],
      ]);
      const entry = (from: string, to: string) => ({
        from: k(from),
        to: k(to),
        size: 10,
        offset: 2,
        length: 3,
        tail: Buffer.from([0xaa, 0xbb]),
      });
      const done = await c.splice!([entry('old', 'new'), entry('short', 'x'), entry('absent', 'y')], 60_000);
      const values = (await c.getBuffers([k('new'), k('x'), k('y')])).map((b) => b?.toString('hex') ?? null);
      // Written with the expiry: PERSIST counts it.
      const expiring = await c.persistMany([k('new')]);
      await c.deleteMany(['old', 'short', 'new'].map(k));
      return { done: Array.from(done!), values, expiring };
    };
    const [want, got] = await Promise.all([run(redis, 'splice-r'), run(memory, 'splice-m')]);
    // Bytes 2..4 of the old value, then the tail (worked by hand); the short and absent sources
    // write nothing.
    expect(want).toEqual({ done: [1, 0, 0], values: ['020304aabb', null, null], expiring: 1 });
    expect(got).toEqual(want);
  });
});
