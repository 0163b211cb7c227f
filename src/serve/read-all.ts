import { LarderError } from '../db/errors.js';
import { setTimeout as sleep } from 'node:timers/promises';
import { CacheUnavailableError, chunks, type FeatureCache } from '../publish/feature-cache.js';
import { type KeyLayout, splitItems } from '../publish/layout.js';
import { NotFoundError } from '../publish/snapshot-catalogue.js';
import { BadRequestError, type SeriesBatch } from './read-types.js';
import type { ViewResolver } from './version-view.js';

export interface ReadAllOptions {
  readonly set: string;
  /** Series per batch (one MGET each), default 500. */
  readonly batchSize?: number;
  /** MGETs in flight at once, default 4 (with 500-series batches of 4.5 kB vectors: 9 MB of replies). */
  readonly inflight?: number;
}

/**
 * Every series of the set's current version, from the cache only (never PostgreSQL), in batches:
 * the version is fixed when the stream starts, so a publish meanwhile does not mix versions in;
 * the old version stays readable for the grace period. Store index keys give the series of
 * each store (no SCAN, which a Cluster cannot do as one command); each batch is one MGET of one
 * store's slot, its reply copied once into the batch's Float32Array as it arrives (on a single
 * Redis, over a connection of its own: `getPacked`).
 */
export async function* readAllSeries(
  cache: FeatureCache,
  layout: KeyLayout,
  resolve: ViewResolver,
  o: ReadAllOptions,
): AsyncGenerator<SeriesBatch> {
  const batchSize = o.batchSize ?? 500;
  const inflight = Math.max(1, o.inflight ?? 4);
  if (!/^[a-z][a-z0-9_]{0,62}$/.test(o.set)) throw new BadRequestError(`set '${o.set}' is not a set name`);
  if (!Number.isInteger(batchSize) || batchSize < 1)
    throw new BadRequestError('batchSize must be a positive integer');
  const view = await resolve(o.set, true);
  if (!view) throw new NotFoundError('UNKNOWN_SET', `set '${o.set}' has no current version in the cache`);
  const { manifest, version, stride } = view;
  const lists = await cache.getStrings(
    manifest.stores.map((st) => layout.storeIndex(o.set, version, st.store)),
  );
  const expired = () =>
    new LarderError(
      'VERSION_EXPIRED',
      `version ${version} of set '${o.set}' expired while being read: read again`,
    );
  function* tasks() {
    for (const [i, st] of manifest.stores.entries()) {
      const items = splitItems(lists[i] ?? '');
      if (items.length !== st.series) throw expired();
      for (const part of chunks(items, batchSize)) yield { store: st.store, items: part };
    }
  }
  const keysOf = (t: { store: string; items: string[] }) =>
    t.items.map((it) => layout.series(o.set, version, t.store, it));
  // A bulk read may meet a command timeout sized for single reads on a busy server: retry a
  // batch a few times before giving up, and say what to change if it keeps happening.
  const getBatch = async (keys: string[]) => {
    for (let attempt = 1; ; attempt++) {
      try {
        return await cache.getPacked(keys, stride);
      } catch (err) {
        if (!(err instanceof CacheUnavailableError) || attempt >= 3) {
          throw err instanceof CacheUnavailableError
            ? new CacheUnavailableError(
                `${err.message} (readAll: try a smaller batchSize or a longer serve.redisTimeoutMs)`,
                { cause: err },
              )
            : err;
        }
        await sleep(50 * attempt);
      }
    }
  };
  const fetch = async (t: { store: string; items: string[] }): Promise<SeriesBatch> => {
    const { values, missing } = await getBatch(keysOf(t));
    if (missing) throw expired();
    return {
      set: o.set,
      version,
      cutoff: manifest.cutoff,
      firstDay: manifest.firstDay,
      horizon: manifest.horizon,
      columns: view.names,
      items: t.items,
      stores: new Array<string>(t.items.length).fill(t.store),
      values,
    };
  };
  const queue: Promise<SeriesBatch>[] = [];
  const push = (p: Promise<SeriesBatch>) => {
    p.catch(() => {}); // awaited below; this only keeps an early exit from leaving it unhandled
    queue.push(p);
  };
  const it = tasks();
  for (let n = it.next(); ; ) {
    while (queue.length < inflight && !n.done) {
      push(fetch(n.value));
      n = it.next();
    }
    const next = queue.shift();
    if (!next) return;
    yield await next;
  }
}
