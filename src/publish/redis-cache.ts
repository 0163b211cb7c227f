import { Cluster, Redis } from 'ioredis';
import { ConfigError, LarderError } from '../db/errors.js';
import { BulkConnection, type BulkTarget } from './bulk-connection.js';
import {
  type CacheEntry,
  CacheUnavailableError,
  chunks,
  type FeatureCache,
  packBatch,
  pushTo,
} from './feature-cache.js';
import { hashTag, LITTLE_ENDIAN_HOST } from './layout.js';

export interface RedisCacheOptions {
  /**
   * `redis://host:port` for one server; several `host:port` separated by commas, or the scheme
   * `redis-cluster://`, for a Redis Cluster (the nodes are seeds; the client finds the rest).
   */
  readonly url: string;
  /** Force Cluster mode for a single seed URL. */
  readonly cluster?: boolean;
  /**
   * A command that gets no answer in this time fails (and a reader falls back to PostgreSQL)
   * rather than waiting: a feature read is worth milliseconds or nothing. Default 250 ms;
   * a publisher wants far longer (`openCache` gives it 30 s).
   */
  readonly commandTimeoutMs?: number;
  readonly connectTimeoutMs?: number;
}

/** Commands per pipeline when writing or expiring many keys (500 vectors of 4.5 kB: ~2 MB). */
const WRITE_WINDOW = 500;
/** Keys per MGET / EXISTS. */
const MULTI_KEY_CHUNK = 500;

interface ParsedTarget {
  readonly cluster: boolean;
  readonly nodes: { host: string; port: number }[];
  readonly url: string;
  readonly tls: boolean;
  /** The database number of a `redis://host:port/N` URL (0 when absent). */
  readonly db: number;
  readonly username?: string;
  readonly password?: string;
}

/** A bulk read waits at least this long for its MGETs (they carry megabytes, not one vector). */
const BULK_TIMEOUT_MS = 5000;

/** Parses the URL forms `createRedisCache` accepts; a malformed one is a ConfigError naming it. */
export function parseRedisTarget(url: string, forceCluster = false): ParsedTarget {
  const m = /^(rediss?|redis-cluster):\/\/(?:([^:@/]*)(?::([^@/]*))?@)?([^/?#]+)(.*)$/.exec(url);
  if (!m) throw new ConfigError(`redis url '${redact(url)}' is not of the form redis://host:port`);
  const hosts = m[4]!.split(',').filter(Boolean);
  const nodes = hosts.map((h) => {
    const hm = /^(\[[^\]]+\]|[^:]+)(?::(\d+))?$/.exec(h);
    if (!hm) throw new ConfigError(`redis url '${redact(url)}': '${h}' is not host:port`);
    return { host: hm[1]!.replace(/^\[|\]$/g, ''), port: hm[2] ? Number(hm[2]) : 6379 };
  });
  const cluster = forceCluster || m[1] === 'redis-cluster' || nodes.length > 1;
  const dbm = /^\/(\d+)/.exec(m[5]!);
  return {
    cluster,
    nodes,
    tls: m[1] === 'rediss',
    db: dbm ? Number(dbm[1]) : 0,
    url: m[1] === 'redis-cluster' ? `redis://${m[4]}${m[5]}` : url,
    ...(m[2] ? { username: decodeURIComponent(m[2]) } : {}),
    ...(m[3] ? { password: decodeURIComponent(m[3]) } : {}),
  };
}

function redact(url: string): string {
  return url.replace(/\/\/([^@/]*)@/, '//***@');
}

/** A Redis reply error (the server answered, with an error): not an outage. */
function isReplyError(err: unknown): boolean {
  return (err as { name?: unknown } | null)?.name === 'ReplyError';
}

/**
 * The Redis implementation of `FeatureCache` on ioredis. Commands fail fast while disconnected
 * (no offline queue: a queue would pile up reads that are worthless by the time Redis returns)
 * and reconnection keeps being retried in the background, so reads resume by themselves.
 */
export function createRedisCache(opts: RedisCacheOptions): FeatureCache {
  const target = parseRedisTarget(opts.url, opts.cluster);
  const commandTimeout = opts.commandTimeoutMs ?? 250;
  const connectTimeout = opts.connectTimeoutMs ?? 1000;
  const retry = (times: number) => Math.min(50 * 2 ** Math.min(times, 6), 2000);
  const common = {
    enableOfflineQueue: false,
    commandTimeout,
    connectTimeout,
    maxRetriesPerRequest: 0,
    ...(target.username ? { username: target.username } : {}),
    ...(target.password ? { password: target.password } : {}),
  };
  const client: Redis | Cluster = target.cluster
    ? new Cluster(target.nodes, {
        enableOfflineQueue: false,
        clusterRetryStrategy: retry,
        slotsRefreshTimeout: connectTimeout,
        redisOptions: common,
      })
    : new Redis(target.url, { ...common, retryStrategy: retry });
  let lastError: unknown;
  // Without a listener ioredis prints every reconnect failure; the state is reported by ready().
  client.on('error', (err: unknown) => {
    lastError = err;
  });
  const what = target.cluster ? 'Redis Cluster' : 'Redis';
  const guard = async <T>(op: string, fn: () => Promise<T>): Promise<T> => {
    if (client.status !== 'ready') {
      throw new CacheUnavailableError(`${what} is not connected (${client.status}) for ${op}`, {
        cause: lastError,
      });
    }
    try {
      return await fn();
    } catch (err) {
      if (isReplyError(err))
        throw new LarderError('CACHE_ERROR', `${what} refused ${op}: ${(err as Error).message}`);
      throw new CacheUnavailableError(`${what} did not answer ${op}: ${(err as Error).message}`, {
        cause: err,
      });
    }
  };
  // One MGET/EXISTS may only name keys of one slot in a Cluster; same tag means same slot.
  const groups = (keys: readonly string[], size = MULTI_KEY_CHUNK): number[][] => {
    if (!target.cluster) return chunks([...keys.keys()], size);
    const byTag = new Map<string, number[]>();
    keys.forEach((k, i) => {
      pushTo(byTag, hashTag(k), i);
    });
    return [...byTag.values()].flatMap((g) => chunks(g, size));
  };
  // Writes go out as explicit pipelines: one socket write per chunk instead of one per command
  // (measured: auto-pipelining halved MGET throughput, so reads are sent as plain commands).
  // A Cluster pipeline may only touch one slot, so chunks follow the tag groups there.
  type Op = (p: ReturnType<typeof client.pipeline>, key: string, i: number) => void;
  const pipelined = async (keys: readonly string[], op: Op): Promise<number> => {
    let total = 0;
    const run = async (idx: number[]) => {
      const p = client.pipeline();
      for (const i of idx) op(p, keys[i]!, i);
      const res = (await p.exec()) ?? [];
      for (const [err, v] of res) {
        if (err) throw err;
        if (typeof v === 'number') total += v;
      }
    };
    const parts = target.cluster ? groups(keys, WRITE_WINDOW) : chunks([...keys.keys()], WRITE_WINDOW);
    // A few pipelines in flight keep the socket busy without buffering the whole version.
    for (let i = 0; i < parts.length; i += 4) await Promise.all(parts.slice(i, i + 4).map(run));
    return total;
  };
  const getBuffers = (keys: readonly string[]) =>
    // One key (a single-series read, the commonest) without the grouping's arrays and promises;
    // still MGET, which answers nil for a key of another type where GET would fail.
    keys.length === 1
      ? guard('MGET', async () => [(await client.mgetBuffer(keys[0]!))[0] ?? null])
      : guard('MGET', async () => {
          const out = new Array<Buffer | null>(keys.length);
          await Promise.all(
            groups(keys).map(async (idx) => {
              const vals = await client.mgetBuffer(idx.map((i) => keys[i]!));
              idx.forEach((i, j) => {
                out[i] = vals[j] ?? null;
              });
            }),
          );
          return out;
        });
  // Bulk reads of packed vectors go over a connection of their own when it can be a plain one
  // (one server, no TLS, a little-endian host), so that they neither queue in front of single
  // reads nor pay the general client's per-value costs; a Cluster reads them through ioredis.
  const bulkTarget: BulkTarget | null =
    !target.cluster && !target.tls && LITTLE_ENDIAN_HOST
      ? {
          host: target.nodes[0]!.host,
          port: target.nodes[0]!.port,
          username: target.username,
          password: target.password,
          db: target.db,
        }
      : null;
  let bulk: BulkConnection | null = null;
  let opening: Promise<BulkConnection> | null = null;
  let closing = false;
  const bulkConnection = (): BulkConnection | Promise<BulkConnection> => {
    if (bulk?.usable()) return bulk;
    opening ??= BulkConnection.open(bulkTarget!, Math.max(commandTimeout, BULK_TIMEOUT_MS), connectTimeout)
      .then((c) => {
        if (closing) c.close();
        bulk = c;
        return c;
      })
      .finally(() => {
        opening = null;
      });
    return opening;
  };
  /** A bulk command on the own connection, its failures as the other commands report them. */
  const onBulk = async <T>(op: string, fn: (c: BulkConnection) => Promise<T>): Promise<T> => {
    try {
      return await fn(await bulkConnection());
    } catch (err) {
      if (err instanceof LarderError) throw err;
      throw new CacheUnavailableError(`${what} did not answer ${op}: ${(err as Error).message}`, {
        cause: err,
      });
    }
  };
  const getPacked = async (keys: readonly string[], floats: number) => {
    if (client.status !== 'ready') {
      throw new CacheUnavailableError(`${what} is not connected (${client.status}) for MGET`, {
        cause: lastError,
      });
    }
    // MGET needs a key; an empty read answers as the in-process cache does.
    if (!bulkTarget || keys.length === 0) return packBatch(await getBuffers(keys), floats);
    return onBulk('MGET', (c) => c.mget(keys, floats));
  };
  return {
    kind: target.cluster ? 'cluster' : 'redis',
    ready: () => client.status === 'ready',
    waitReady(timeoutMs) {
      if (client.status === 'ready') return Promise.resolve(true);
      return new Promise((resolve) => {
        const done = (ok: boolean) => {
          clearTimeout(timer);
          client.off('ready', onReady);
          resolve(ok);
        };
        const onReady = () => done(true);
        const timer = setTimeout(() => done(client.status === 'ready'), timeoutMs);
        client.on('ready', onReady);
      });
    },
    getString: (key) => guard('GET', () => client.get(key)),
    getBuffer: (key) => guard('GET', () => client.getBuffer(key)),
    getBuffers,
    getPacked,
    async getStrings(keys) {
      return (await getBuffers(keys)).map((b) => b?.toString() ?? null);
    },
    setMany: (entries: readonly CacheEntry[], ttlMs?: number) =>
      guard('SET', async () => {
        if (bulkTarget) {
          await onBulk('SET', (c) => c.setMany(entries, ttlMs));
          return;
        }
        await pipelined(
          entries.map(([k]) => k),
          (p, k, i) => {
            const v = entries[i]![1];
            if (ttlMs) p.set(k, v, 'PX', ttlMs);
            else p.set(k, v);
          },
        );
      }),
    countExisting: (keys) =>
      guard('EXISTS', async () => {
        const counts = await Promise.all(groups(keys).map((idx) => client.exists(idx.map((i) => keys[i]!))));
        return counts.reduce((a, b) => a + b, 0);
      }),
    persistMany: (keys) =>
      guard('PERSIST', () =>
        bulkTarget
          ? onBulk('PERSIST', (c) => c.eachKey('PERSIST', keys))
          : pipelined(keys, (p, k) => p.persist(k)),
      ),
    expireMany: (keys, seconds) =>
      guard('EXPIRE', async () => {
        if (bulkTarget) await onBulk('EXPIRE', (c) => c.eachKey('EXPIRE', keys, [String(seconds)]));
        else await pipelined(keys, (p, k) => p.expire(k, seconds));
      }),
    incr: (key) => guard('INCR', () => client.incr(key)),
    swap: (key, value) =>
      guard('SET GET', async () => (await client.call('SET', key, value, 'GET')) as string | null),
    deleteMany: (keys) =>
      guard('DEL', async () => {
        await pipelined(keys, (p, k) => p.del(k));
      }),
    async close() {
      closing = true;
      await opening?.catch(() => null);
      bulk?.close();
      if (client.status === 'ready') await client.quit().catch(() => client.disconnect());
      else client.disconnect();
    },
  };
}
