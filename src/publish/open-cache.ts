import type { Config } from '../config/config.js';
import type { FeatureCache } from './feature-cache.js';
import { createMemoryCache } from './memory-cache.js';
import { createRedisCache } from './redis-cache.js';

/**
 * The configured cache: Redis when `redis.url` (or REDIS_URL) is set, otherwise the in-process
 * cache shared by everything in this process under the same prefix (the embedded demo).
 */
export function openCache(
  config: Config,
  opts: { url?: string | undefined; cluster?: boolean } = {},
): FeatureCache {
  const url = opts.url ?? config.redis.url;
  if (!url) return createMemoryCache(config.redis.prefix);
  return createRedisCache({
    url,
    ...(opts.cluster !== undefined ? { cluster: opts.cluster } : {}),
    commandTimeoutMs: config.serve.redisTimeoutMs,
  });
}
