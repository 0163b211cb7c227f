import { type Config, parseConfig } from '../config/config.js';
import { readEnv } from '../config/env.js';
import { formatDay, parseDay } from '../core/days.js';
import type { Db } from '../db/database.js';
import { LarderError } from '../db/errors.js';
import { openDatabase } from '../db/open.js';
import { CacheUnavailableError, chunks, type FeatureCache, pushTo } from '../publish/feature-cache.js';
import { KeyLayout, type Manifest, parseManifest, splitItems, unpackInto } from '../publish/layout.js';
import { openCache } from '../publish/open-cache.js';
import { NotFoundError } from '../publish/snapshot-catalogue.js';
import { FallbackReader, type FallbackTarget } from './fallback-reader.js';
import {
  BadRequestError,
  type FallbackReason,
  type FeatureRead,
  type FeatureRow,
  type ReaderEvents,
  type ReadRequest,
  type SeriesBatch,
  type SetInfo,
  UnavailableError,
} from './read-types.js';

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
  readonly events?: ReaderEvents;
}

export interface GetManyOptions {
  /** `error` (default): an unknown series fails the call; `null`: its slot in the result is null. */
  readonly unknown?: 'error' | 'null';
}

export interface ReadAllOptions {
  readonly set: string;
  /** Series per batch (one MGET each), default 200. */
  readonly batchSize?: number;
  /** MGETs in flight at once, default 8. */
  readonly inflight?: number;
}

export interface Reader {
  readonly cache: FeatureCache;
  readonly db: Db;
  get(req: ReadRequest): Promise<FeatureRead>;
  getMany(reqs: readonly ReadRequest[], opts?: { unknown?: 'error' }): Promise<FeatureRead[]>;
  getMany(reqs: readonly ReadRequest[], opts: GetManyOptions): Promise<(FeatureRead | null)[]>;
  /** What a set serves now: version, cutoff, columns. */
  describe(set: string): Promise<SetInfo>;
  /** Every series of the set's current version, from the cache only, in batches. */
  readAll(opts: ReadAllOptions): AsyncGenerator<SeriesBatch>;
  cacheReady(): boolean;
  close(): Promise<void>;
}

interface View {
  readonly version: number;
  readonly manifest: Manifest;
  readonly firstDay: number;
  readonly days: readonly string[];
  readonly names: readonly string[];
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
    opts.cache ?? openCache(config, { url: opts.redisUrl, ...(opts.cluster ? { cluster: true } : {}) });
  if (ownCache) await cache.waitReady(1000);
  const layout = new KeyLayout(config.redis.prefix);
  const fallback = new FallbackReader(db);
  const pointerMs = opts.pointerCacheMs ?? config.serve.pointerCacheMs;
  const events = opts.events ?? {};
  const pointers = new Map<string, { at: number; version: number | null }>();
  const views = new Map<string, View>();

  /** The set's current version in the cache, or null when the cache has none. */
  async function resolve(set: string, fresh = false): Promise<View | null> {
    let p = pointers.get(set);
    if (fresh || !p || performance.now() - p.at >= pointerMs) {
      const v = await cache.getString(layout.pointer(set));
      p = { at: performance.now(), version: v === null ? null : Number(v) };
      pointers.set(set, p);
    }
    if (p.version === null) return null;
    const viewKey = `${set}:${p.version}`;
    const known = views.get(viewKey);
    if (known) return known;
    const mKey = layout.manifest(set, p.version);
    const text = await cache.getString(mKey);
    if (text === null) return null;
    const manifest = parseManifest(text, mKey);
    const firstDay = parseDay(manifest.firstDay)!;
    const view: View = {
      version: p.version,
      manifest,
      firstDay,
      days: Array.from({ length: manifest.horizon }, (_, h) => formatDay(firstDay + h)),
      names: manifest.columns.map((c) => c.name),
    };
    // Manifests never change; keep a few versions per process.
    if (views.size >= 64) views.delete(views.keys().next().value!);
    views.set(viewKey, view);
    return view;
  }

  function decode(view: View, p: Parsed, buf: Buffer): FeatureRead | null {
    const H = view.manifest.horizon;
    const F = view.names.length;
    if (buf.byteLength !== H * F * 4) return null;
    const m = new Float32Array(H * F);
    unpackInto(buf, m, 0);
    const h0 = p.day === null ? 0 : p.day - view.firstDay;
    const h1 = p.day === null ? H : h0 + 1;
    const rows: FeatureRow[] = [];
    for (let h = h0; h < h1; h++) {
      const features: Record<string, number | null> = {};
      for (let f = 0; f < F; f++) {
        const v = m[h * F + f]!;
        features[view.names[f]!] = Number.isNaN(v) ? null : v;
      }
      rows.push({ day: view.days[h]!, features });
    }
    return { ...key(p), cutoff: view.manifest.cutoff, version: view.version, source: 'cache', rows };
  }

  const key = (p: Parsed) => ({ set: p.set, item: p.item, store: p.store });

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

  async function readSet(
    set: string,
    idx: number[],
    parsed: Parsed[],
    out: (FeatureRead | null)[],
    at: (i: number) => string,
  ) {
    let view: View | null = null;
    let reason: FallbackReason = 'unavailable';
    let pending = idx;
    if (cache.ready()) {
      try {
        view = await resolve(set);
        if (!view) reason = 'unpublished';
      } catch (err) {
        if (!isCacheFailure(err)) throw err;
      }
    }
    if (view) {
      const v = view;
      for (const i of idx) checkDay(set, v.version, v.firstDay, v.manifest.horizon, parsed[i]!, at(i));
      try {
        const bufs = await cache.getBuffers(
          idx.map((i) => layout.series(set, v.version, parsed[i]!.store, parsed[i]!.item)),
        );
        pending = [];
        idx.forEach((i, j) => {
          const b = bufs[j];
          const read = b ? decode(v, parsed[i]!, b) : null;
          if (read) out[i] = read;
          else pending.push(i);
        });
        if (idx.length > pending.length) events.hit?.(idx.length - pending.length);
        if (pending.length) events.miss?.(pending.length);
        reason = 'miss';
      } catch (err) {
        if (!isCacheFailure(err)) throw err;
      }
    }
    if (pending.length === 0) return;
    events.fallback?.(reason, pending.length);
    const target = await fallbackTarget(set);
    const first = parseDay(target.entry.cutoff)! + 1;
    if (!view)
      for (const i of pending) checkDay(set, target.version, first, target.entry.horizon, parsed[i]!, at(i));
    let rows: Awaited<ReturnType<FallbackReader['read']>>;
    try {
      rows = await fallback.read(
        target,
        pending.map((i) => parsed[i]!),
      );
    } catch (err) {
      throw new UnavailableError(`set '${set}': the cache could not answer and the database read failed`, {
        cause: err,
      });
    }
    pending.forEach((i, j) => {
      const r = rows[j];
      out[i] = r
        ? {
            ...key(parsed[i]!),
            cutoff: target.entry.cutoff,
            version: target.version,
            source: 'fallback',
            rows: r,
          }
        : null;
    });
  }

  async function getMany(
    reqs: readonly ReadRequest[],
    o: GetManyOptions = {},
  ): Promise<(FeatureRead | null)[]> {
    const many = reqs.length > 1;
    const at = (i: number) => (many ? `request ${i}: ` : '');
    const parsed = reqs.map((r, i) => parseRequest(r, at(i)));
    const out = new Array<FeatureRead | null>(reqs.length).fill(null);
    const bySet = new Map<string, number[]>();
    parsed.forEach((p, i) => {
      pushTo(bySet, p.set, i);
    });
    await Promise.all([...bySet].map(([set, idx]) => readSet(set, idx, parsed, out, at)));
    if ((o.unknown ?? 'error') === 'error') {
      const missing = parsed.filter((_, i) => out[i] === null);
      if (missing.length) {
        const p = missing[0]!;
        const more = missing.length > 1 ? ` (and ${missing.length - 1} more)` : '';
        throw new NotFoundError(
          'UNKNOWN_SERIES',
          `set '${p.set}' has no series item '${p.item}' at store '${p.store}'${more}`,
        );
      }
    }
    return out;
  }

  async function* readAll(o: ReadAllOptions): AsyncGenerator<SeriesBatch> {
    const batchSize = o.batchSize ?? 200;
    const inflight = Math.max(1, o.inflight ?? 8);
    if (!SET_RE.test(o.set)) throw new BadRequestError(`set '${o.set}' is not a set name`);
    if (!Number.isInteger(batchSize) || batchSize < 1)
      throw new BadRequestError('batchSize must be a positive integer');
    const view = await resolve(o.set, true);
    if (!view) throw new NotFoundError('UNKNOWN_SET', `set '${o.set}' has no current version in the cache`);
    const { manifest, version } = view;
    const stride = manifest.horizon * view.names.length;
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
    const fetch = async (t: { store: string; items: string[] }): Promise<SeriesBatch> => {
      const bufs = await cache.getBuffers(t.items.map((it) => layout.series(o.set, version, t.store, it)));
      const values = new Float32Array(t.items.length * stride);
      bufs.forEach((b, j) => {
        if (!b || b.byteLength !== stride * 4) throw expired();
        unpackInto(b, values, j * stride);
      });
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
      p.catch(() => {}); // awaited below; this only stops an early exit from leaving it unhandled
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

  return {
    cache,
    db,
    async get(req) {
      return (await getMany([req]))[0]!;
    },
    getMany: getMany as Reader['getMany'],
    async describe(set) {
      parseRequest({ set, item: '-', store: '-' }, '');
      let view: View | null = null;
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
    readAll,
    cacheReady: () => cache.ready(),
    async close() {
      if (ownCache) await cache.close();
      if (ownDb) await db.close();
    },
  };
}
