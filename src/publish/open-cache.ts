import type { Config } from '../config/config.js';
import type { FeatureCache } from './feature-cache.js';
import { createMemoryCache } from './memory-cache.js';
import { createRedisCache } from './redis-cache.js';

export interface OpenCacheOptions {
  readonly url?: string | undefined;
  readonly cluster?: boolean;
  /**
   * `read` (the serving path): commands time out after `serve.redisTimeoutMs`, so a read falls
   * back to PostgreSQL quickly. `write` (default; publish): a generous timeout, since a pipeline
   * of thousands of vectors can take far longer than a read is worth waiting.
   */
  readonly purpose?: 'read' | 'write';
}

/** Command timeout for publishing. */
const WRITE_TIMEOUT_MS = 30_000;

/**
 * The configured cache: Redis when `redis.url` (or REDIS_URL) is set, otherwise the in-process
 * cache shared by everything in this process under the same prefix (the embedded demo).
 */
export function openCache(config: Config, opts: OpenCacheOptions = {}): FeatureCache {
  const url = opts.url ?? config.redis.url;
  if (!url) return createMemoryCache(config.redis.prefix);
  return createRedisCache({
    url,
    ...(opts.cluster !== undefined ? { cluster: opts.cluster } : {}),
    commandTimeoutMs: opts.purpose === 'read' ? config.serve.redisTimeoutMs : WRITE_TIMEOUT_MS,
  });
}
