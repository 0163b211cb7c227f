import { endianness } from 'node:os';
import { type Config, parseConfig } from '../config/config.js';
import { readEnv } from '../config/env.js';
import { formatDay, parseDay } from '../core/days.js';
import type { Db } from '../db/database.js';
import { LarderError } from '../db/errors.js';
import { openDatabase } from '../db/open.js';
import { CacheUnavailableError, type FeatureCache, pushTo } from '../publish/feature-cache.js';
import { KeyLayout, unpackInto } from '../publish/layout.js';
import { openCache } from '../publish/open-cache.js';
import { NotFoundError } from '../publish/snapshot-catalogue.js';
import { FallbackReader, type FallbackTarget } from './fallback-reader.js';
import { NearCache } from './near-cache.js';
import { type ReadAllOptions, readAllSeries } from './read-all.js';
import {
  BadRequestError,
  type FallbackReason,
  type FeatureRead,
  type ReaderEvents,
  type ReadRequest,
  type ReadSource,
  type SeriesBatch,
  type SetInfo,
  UnavailableError,
  type VectorBatch,
} from './read-types.js';
import { createViewResolver, decodeRows, type VersionView } from './version-view.js';

export type { ReadAllOptions } from './read-all.js';

export interface ReaderOptions {
  /** Redis to read; default `config.redis.url` (REDIS_URL); none means the in-process cache. */
  readonly redisUrl?: string;
  /** PostgreSQL for the fallback; default `config.database.url` (DATABASE_URL). */
  readonly databaseUrl?: string;
  /** Default: the defaults plus the environment. */
  readonly config?: Config;
  /** An open cache to use instead (left open by `close`). */
  readonly cache?: FeatureCache;
  /** An open database to use instead (left open by `close`). */
  readonly db?: Db;
  readonly cluster?: boolean;
  /** How long the pointer read last is trusted (default `serve.pointerCacheMs`). */
  readonly pointerCacheMs?: number;
  /**
   * Bytes of packed matrices of the current versions kept in process (default
   * `serve.nearCacheMb`; 0: none). Not used over the in-process cache, which is already local.
   */
  readonly nearCacheBytes?: number;
  /** Load a whole current version into the copies in the background (default `serve.nearCacheWarm`). */
  readonly warmNearCache?: boolean;
  readonly events?: ReaderEvents;
}

export interface GetManyOptions {
  /** `error` (default): an unknown series fails the call; `null`: its slot in the result is null. */
  readonly unknown?: 'error' | 'null';
}

export interface Reader {
  readonly cache: FeatureCache;
  readonly db: Db;
  /** One series (all H days, or one `day`) with named features. */
  get(req: ReadRequest): Promise<FeatureRead>;
  /** Several series, in request order; one MGET per store slot, one SQL query for any misses. */
  getMany(reqs: readonly ReadRequest[], opts?: { unknown?: 'error' }): Promise<FeatureRead[]>;
  getMany(reqs: readonly ReadRequest[], opts: GetManyOptions): Promise<(FeatureRead | null)[]>;
  /** Several series of one set as matrices in one Float32Array (no per-feature objects). */
  getVectors(set: string, series: readonly { item: string; store: string }[]): Promise<VectorBatch>;
  /** What a set serves now: version, cutoff, columns. */
  describe(set: string): Promise<SetInfo>;
  /** Every series of the set's current version, from the cache only, in batches. */
  readAll(opts: ReadAllOptions): AsyncGenerator<SeriesBatch>;
  cacheReady(): boolean;
  close(): Promise<void>;
}

interface Parsed {
  readonly set: string;
  readonly item: string;
  readonly store: string;
  readonly day: number | null;
}

const ID_RE = /^[^\p{Cc}]{1,64}$/u;
const SET_RE = /^[a-z][a-z0-9_]{0,62}$/;

/** Validates one request, naming the field that is wrong. */
function parseRequest(r: ReadRequest, at: string): Parsed {
  if (typeof r.set !== 'string' || !SET_RE.test(r.set)) {
    throw new BadRequestError(
      `${at}set '${String(r.set)}' is not a set name (expected ^[a-z][a-z0-9_]{0,62}$)`,
    );
  }
  for (const f of ['item', 'store'] as const) {
    if (typeof r[f] !== 'string' || !ID_RE.test(r[f])) {
      throw new BadRequestError(`${at}${f} must be 1-64 characters without control characters`);
    }
  }
  let day: number | null = null;
  if (r.day !== undefined) {
    day = parseDay(r.day);
    if (day === null) throw new BadRequestError(`${at}day '${r.day}' is not a valid day (YYYY-MM-DD)`);
  }
  return { set: r.set, item: r.item, store: r.store, day };
}

function checkDay(set: string, version: number, first: number, horizon: number, p: Parsed, at: string) {
  if (p.day !== null && (p.day < first || p.day >= first + horizon)) {
    throw new BadRequestError(
      `${at}day ${formatDay(p.day)} is not served by set '${set}' (version ${version}): ` +
        `days ${formatDay(first)} .. ${formatDay(first + horizon - 1)}`,
    );
  }
}

const isCacheFailure = (err: unknown) =>
  err instanceof CacheUnavailableError || (err instanceof LarderError && err.code === 'CACHE_ERROR');

/** What the cache answered for a group of requests of one set. */
interface CacheLookup {
  readonly view: VersionView | null;
  /** Packed matrices by request index. */
  readonly hits: Map<number, Buffer>;
  /** Requests to read from PostgreSQL, and why. */
  readonly pending: number[];
  readonly reason: FallbackReason;
}

/**
 * Opens a reader: feature reads from the cache by the set's current version, falling back to the
 * snapshot table in PostgreSQL on a miss or when the cache is unreachable (and saying so).
 */
export async function createReader(opts: ReaderOptions = {}): Promise<Reader> {
  const base = opts.config ?? parseConfig({}, 'createReader', readEnv());
  const config: Config = opts.databaseUrl
    ? { ...base, database: { ...base.database, url: opts.databaseUrl } }
    : base;
  const ownDb = !opts.db;
  const db = opts.db ?? (await openDatabase(config, { migrate: false }));
  const ownCache = !opts.cache;
  const cache =
    opts.cache ??
    openCache(config, { url: opts.redisUrl, purpose: 'read', ...(opts.cluster ? { cluster: true } : {}) });
  if (ownCache) await cache.waitReady(1000);
  const layout = new KeyLayout(config.redis.prefix);
  const fallback = new FallbackReader(db);
  const resolve = createViewResolver(cache, layout, opts.pointerCacheMs ?? config.serve.pointerCacheMs);
  const events = opts.events ?? {};
  const nearBytes = opts.nearCacheBytes ?? config.serve.nearCacheMb * 2 ** 20;
  const near = cache.kind !== 'memory' && nearBytes > 0 ? new NearCache(nearBytes) : null;
  // The bulk read gives host-order floats; the copies hold the cache's little-endian bytes.
  const warmNear =
    near !== null && endianness() === 'LE' && (opts.warmNearCache ?? config.serve.nearCacheWarm);
  // The version of each set whose copies are being (or have been) loaded in the background.
  const warming = new Map<string, number>();
  let closed = false;

  /**
   * Copies every series of `view` into the near cache from the cache's own bulk read, in small
   * batches with a turn of the event loop between them (reads go on meanwhile). Stops when a
   * newer version of the set starts loading or the reader closes; a failure only ends it (reads
   * then fill the copies one by one, as without warming).
   */
  function warm(set: string, view: VersionView): void {
    if (!warmNear || warming.get(set) === view.version) return;
    const series = view.manifest.stores.reduce((a, st) => a + st.series, 0);
    if (series * view.stride * 4 > near!.maxBytes) return; // it would only push copies out
    const version = view.version;
    warming.set(set, version);
    const bytes = view.stride * 4;
    void (async () => {
      try {
        for await (const b of readAllSeries(cache, layout, resolve, { set, batchSize: 100, inflight: 1 })) {
          if (closed || warming.get(set) !== version || b.version !== version) return;
          const buf = new Uint8Array(b.values.buffer, b.values.byteOffset, b.values.byteLength);
          for (let i = 0; i < b.items.length; i++)
            near!.put(
              set,
              version,
              layout.series(set, version, b.stores[i]!, b.items[i]!),
              buf.subarray(i * bytes, (i + 1) * bytes),
            );
          await new Promise<void>((res) => setImmediate(res));
        }
      } catch {
        // Best effort: the reads themselves still go to the cache and fill the copies.
      }
    })();
  }

  async function lookup(set: string, idx: number[], parsed: readonly Parsed[], at: (i: number) => string) {
    let view: VersionView | null = null;
    let reason: FallbackReason = 'unavailable';
    const hits = new Map<number, Buffer>();
    if (cache.ready()) {
      try {
        view = await resolve(set);
        if (!view) reason = 'unpublished';
      } catch (err) {
        if (!isCacheFailure(err)) throw err;
      }
    }
    if (!view) return { view, hits, pending: idx, reason } satisfies CacheLookup;
    const v = view;
    warm(set, v);
    for (const i of idx) checkDay(set, v.version, v.firstDay, v.manifest.horizon, parsed[i]!, at(i));
    const keys = idx.map((i) => layout.series(set, v.version, parsed[i]!.store, parsed[i]!.item));
    // Copies held in process, for the version just resolved only (a switch drops the set's copies).
    let ask = idx;
    let askKeys = keys;
    if (near) {
      ask = [];
      askKeys = [];
      idx.forEach((i, j) => {
        const b = near.get(set, v.version, keys[j]!);
        if (b) hits.set(i, b);
        else {
          ask.push(i);
          askKeys.push(keys[j]!);
        }
      });
      if (hits.size) events.nearHit?.(hits.size);
    }
    const pending: number[] = [];
    if (ask.length) {
      let bufs: (Buffer | null)[];
      try {
        bufs = await cache.getBuffers(askKeys);
      } catch (err) {
        if (!isCacheFailure(err)) throw err;
        if (hits.size) events.hit?.(hits.size);
        return { view, hits, pending: ask, reason: 'unavailable' } satisfies CacheLookup;
      }
      ask.forEach((i, j) => {
        const b = bufs[j];
        // A value of the wrong size is not this version's vector: read it from PostgreSQL instead.
        if (b && b.byteLength === v.stride * 4) {
          hits.set(i, b);
          near?.put(set, v.version, askKeys[j]!, b);
        } else pending.push(i);
      });
    }
    if (hits.size) events.hit?.(hits.size);
    if (pending.length) events.miss?.(pending.length);
    return { view, hits, pending, reason: 'miss' } satisfies CacheLookup;
  }

  async function fallbackTarget(set: string): Promise<FallbackTarget> {
    let target: FallbackTarget | null;
    try {
      target = await fallback.target(set);
    } catch (err) {
      throw new UnavailableError(`set '${set}': the cache could not answer and neither did the database`, {
        cause: err,
      });
    }
    if (!target) throw new NotFoundError('UNKNOWN_SET', `set '${set}' is not published`);
    return target;
  }

  /** Reads `pending` requests from PostgreSQL; rows per request, null for an unknown series. */
  async function fromDatabase(
    set: string,
    found: CacheLookup,
    parsed: readonly Parsed[],
    at: (i: number) => string,
  ) {
    events.fallback?.(found.reason, found.pending.length);
    const target = await fallbackTarget(set);
    const first = parseDay(target.entry.cutoff)! + 1;
    if (!found.view) {
      for (const i of found.pending)
        checkDay(set, target.version, first, target.entry.horizon, parsed[i]!, at(i));
    }
    try {
      return {
        target,
        rows: await fallback.read(
          target,
          found.pending.map((i) => parsed[i]!),
        ),
      };
    } catch (err) {
      throw new UnavailableError(`set '${set}': the cache could not answer and the database read failed`, {
        cause: err,
      });
    }
  }

  const key = (p: Parsed) => ({ set: p.set, item: p.item, store: p.store });

  /** Reads the requests `idx` of one set into `out` (null for an unknown series). */
  async function readSet(
    set: string,
    idx: number[],
    parsed: readonly Parsed[],
    out: (FeatureRead | null)[],
    at: (i: number) => string,
  ): Promise<void> {
    const found = await lookup(set, idx, parsed, at);
    const v = found.view;
    if (v) {
      for (const [i, b] of found.hits) {
        const p = parsed[i]!;
        out[i] = {
          set: p.set,
          item: p.item,
          store: p.store,
          cutoff: v.manifest.cutoff,
          version: v.version,
          source: 'cache',
          rows: decodeRows(v, b, p.day)!,
        };
      }
    }
    if (found.pending.length === 0) return;
    const { target, rows } = await fromDatabase(set, found, parsed, at);
    found.pending.forEach((i, j) => {
      const r = rows[j];
      const read = { ...key(parsed[i]!), cutoff: target.entry.cutoff, version: target.version };
      out[i] = r ? { ...read, source: 'fallback', rows: r } : null;
    });
  }

  function unknownSeries(missing: readonly Parsed[]): NotFoundError {
    const p = missing[0]!;
    const more = missing.length > 1 ? ` (and ${missing.length - 1} more)` : '';
    return new NotFoundError(
      'UNKNOWN_SERIES',
      `set '${p.set}' has no series item '${p.item}' at store '${p.store}'${more}`,
    );
  }

  const noPrefix = () => '';
  const ONLY = [0];

  /** One series: `getMany` of one request without its grouping by set. */
  async function get(req: ReadRequest): Promise<FeatureRead> {
    const parsed = [parseRequest(req, '')];
    const out: (FeatureRead | null)[] = [null];
    await readSet(parsed[0]!.set, ONLY, parsed, out, noPrefix);
    if (!out[0]) throw unknownSeries(parsed);
    return out[0];
  }

  async function getMany(
    reqs: readonly ReadRequest[],
    o: GetManyOptions = {},
  ): Promise<(FeatureRead | null)[]> {
    const at = (i: number) => (reqs.length > 1 ? `request ${i}: ` : '');
    const parsed = reqs.map((r, i) => parseRequest(r, at(i)));
    const out = new Array<FeatureRead | null>(reqs.length).fill(null);
    const bySet = new Map<string, number[]>();
    parsed.forEach((p, i) => {
      pushTo(bySet, p.set, i);
    });
    await Promise.all([...bySet].map(([set, idx]) => readSet(set, idx, parsed, out, at)));
    if ((o.unknown ?? 'error') === 'error') {
      const missing = parsed.filter((_, i) => out[i] === null);
      if (missing.length) throw unknownSeries(missing);
    }
    return out;
  }

  async function getVectors(
    set: string,
    series: readonly { item: string; store: string }[],
  ): Promise<VectorBatch> {
    const at = (i: number) => (series.length > 1 ? `series ${i}: ` : '');
    const parsed = series.map((s, i) => parseRequest({ set, item: s.item, store: s.store }, at(i)));
    const idx = parsed.map((_, i) => i);
    const found = await lookup(set, idx, parsed, at);
    const sources = new Array<ReadSource | null>(parsed.length).fill(null);
    const fill = (frame: { stride: number }) => {
      const values = new Float32Array(parsed.length * frame.stride).fill(Number.NaN);
      for (const [i, b] of found.hits) {
        unpackInto(b, values, i * frame.stride);
        sources[i] = 'cache';
      }
      return values;
    };
    if (found.view && found.pending.length === 0) {
      const v = found.view;
      const m = v.manifest;
      const values = fill(v);
      return {
        set,
        version: v.version,
        cutoff: m.cutoff,
        firstDay: m.firstDay,
        horizon: m.horizon,
        columns: v.names,
        values,
        sources,
      };
    }
    const { target, rows } = await fromDatabase(set, found, parsed, at);
    const e = target.entry;
    const v = found.view;
    const frame = v
      ? { version: v.version, cutoff: v.manifest.cutoff, horizon: v.manifest.horizon, names: v.names }
      : {
          version: target.version,
          cutoff: e.cutoff,
          horizon: e.horizon,
          names: e.columns.map((c) => c.name),
        };
    const F = frame.names.length;
    const stride = frame.horizon * F;
    const values = fill({ stride });
    const first = parseDay(frame.cutoff)! + 1;
    // Database rows fit the frame only when they come from the same cutoff and columns.
    const fits =
      e.cutoff === frame.cutoff &&
      e.columns.length === F &&
      e.columns.every((c, f) => c.name === frame.names[f]);
    found.pending.forEach((i, j) => {
      const r = rows[j];
      if (!r || !fits) return;
      for (const row of r) {
        const h = parseDay(row.day)! - first;
        for (let f = 0; f < F; f++)
          values[i * stride + h * F + f] = row.features[frame.names[f]!] ?? Number.NaN;
      }
      sources[i] = 'fallback';
    });
    return {
      set,
      ...frame,
      firstDay: formatDay(first),
      columns: frame.names,
      values,
      sources,
    } as VectorBatch;
  }

  return {
    cache,
    db,
    get,
    getMany: getMany as Reader['getMany'],
    getVectors,
    async describe(set) {
      parseRequest({ set, item: '-', store: '-' }, '');
      let view: VersionView | null = null;
      if (cache.ready()) {
        try {
          view = await resolve(set);
        } catch (err) {
          if (!isCacheFailure(err)) throw err;
        }
      }
      if (view) {
        const m = view.manifest;
        return {
          set,
          version: view.version,
          cutoff: m.cutoff,
          horizon: m.horizon,
          firstDay: m.firstDay,
          definitionHash: m.definitionHash,
          columns: m.columns.map((c) => ({ name: c.name, type: c.type })),
          series: m.series,
          source: 'cache',
        };
      }
      const t = await fallbackTarget(set);
      const e = t.entry;
      return {
        set,
        version: t.version,
        cutoff: e.cutoff,
        horizon: e.horizon,
        firstDay: formatDay(parseDay(e.cutoff)! + 1),
        definitionHash: e.definitionHash,
        columns: e.columns.map((c) => ({ name: c.name, type: c.type })),
        // Prediction rows are exactly H per series (docs/contracts.md).
        series: Math.round(e.predictRows / e.horizon),
        source: 'fallback',
      };
    },
    readAll: (o) => readAllSeries(cache, layout, resolve, o),
    cacheReady: () => cache.ready(),
    async close() {
      closed = true;
      if (ownCache) await cache.close();
      if (ownDb) await db.close();
    },
  };
}
