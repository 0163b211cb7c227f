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
});
