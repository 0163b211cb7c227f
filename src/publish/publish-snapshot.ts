import { createHash } from 'node:crypto';
import { endianness } from 'node:os';
import type { Config } from '../config/config.js';
import { formatDay, parseDay } from '../core/days.js';
import { type Db, type DbSession, quoteIdent, safeIdent } from '../db/database.js';
import { LarderError, UsageError } from '../db/errors.js';
import {
  type CacheEntry,
  CacheUnavailableError,
  type FeatureCache,
  type PackedBatch,
  pushTo,
} from './feature-cache.js';
import {
  KeyLayout,
  type Manifest,
  type ManifestStore,
  packMatrix,
  parseManifest,
  splitItems,
} from './layout.js';
import { planCarry } from './carry.js';
import { drainable, readPredictRows } from './predict-rows.js';
import { findSnapshot, type SnapshotEntry } from './snapshot-catalogue.js';

export interface PublishOptions {
  readonly set: string;
  /** The snapshot's cutoff, `YYYY-MM-DD`. */
  readonly cutoff: string;
  /** Seconds the previous version stays readable after the switch (default `serve.graceSeconds`). */
  readonly graceSeconds?: number;
  /** Called after each written batch of series (progress for the CLI and the job runner). */
  readonly onProgress?: (written: number) => void;
  /**
   * Carry the days an incremental refresh kept over from the current version (default true);
   * false reads every prediction row from the snapshot.
   */
  readonly carry?: boolean;
}

export interface PublishResult {
  readonly publishId: number;
  readonly set: string;
  readonly cutoff: string;
  readonly version: number;
  /** Series keys written (one per series). */
  readonly keys: number;
  /** Bytes of values written: vectors, store indexes and the manifest. */
  readonly bytes: number;
  /** Series whose kept days came from the previous version instead of the snapshot (see carry.ts). */
  readonly carried: number;
  readonly seconds: number;
  /** The version the pointer named before, now expiring; null on the first publish. */
  readonly previous: number | null;
  /** Milliseconds: COPY and packing net of writes, writing, counting back, switching and expiring. */
  readonly timings: PublishTimings;
}

export interface PublishTimings {
  /** Reading the table and packing: the time not spent waiting for the cache. */
  readonly readMs: number;
  /** Waiting for the carried vectors of the previous version. */
  readonly carryMs: number;
  /** Waiting for writes (rounds overlap the reads, so only what they add shows). */
  readonly writeMs: number;
  readonly verifyMs: number;
  readonly switchMs: number;
}

/** Series written per cache round, at most; a small set is cut into ROUNDS rounds, so its rounds overlap too. */
const WRITE_BATCH = 2000;
const ROUNDS = 8;
/** Cache rounds of writes, and of reads of carried vectors, left under way while the next batch is read. */
const WRITES_IN_FLIGHT = 2;
const FETCHES_IN_FLIGHT = 2;

/** Promises awaited in order, at most `limit` of them left pending; `waitedMs` is the time spent waiting. */
class Lanes {
  private readonly queue: Array<Promise<unknown>> = [];
  waitedMs = 0;
  constructor(private readonly limit: number) {}

  /** Adds a round; waits for the oldest while more than `limit` are pending. */
  async add(round: Promise<unknown>): Promise<void> {
    round.catch(() => {}); // awaited in order; a failure must not go unhandled meanwhile
    this.queue.push(round);
    while (this.queue.length > this.limit) await this.wait(this.queue.shift()!);
  }

  async drain(): Promise<void> {
    while (this.queue.length > 0) await this.wait(this.queue.shift()!);
  }

  private async wait(round: Promise<unknown>): Promise<void> {
    const t = performance.now();
    try {
      await round;
    } finally {
      this.waitedMs += performance.now() - t;
    }
  }
}
const LITTLE_ENDIAN_HOST = endianness() === 'LE';

/**
 * Copies the prediction rows (`C+1 .. C+H`) of the snapshot of `(set, cutoff)` into the cache
 * as a new version, then switches the set's pointer to it (docs/serving.md):
 * 1. every key is written with an expiry (`serve.pendingSeconds`), so a publisher that dies
 *    mid-write leaves nothing behind for long and the pointer never names a partial version;
 * 2. the keys are counted back (EXISTS per store tag) against what was written;
 * 3. their expiry is removed, the pointer is swapped in one SET ... GET, and the previous
 *    version's keys get the grace expiry.
 * One publisher per set at a time (advisory lock); each publish is a row in `publishes`.
 */
export async function publishSnapshot(
  db: Db,
  cache: FeatureCache,
  config: Config,
  opts: PublishOptions,
): Promise<PublishResult> {
  const set = safeIdentOrUsage(opts.set);
  if (parseDay(opts.cutoff) === null)
    throw new UsageError(`cutoff '${opts.cutoff}' is not a valid day (YYYY-MM-DD)`);
  const graceSeconds = opts.graceSeconds ?? config.serve.graceSeconds;
  if (!Number.isInteger(graceSeconds) || graceSeconds < 1) {
    throw new UsageError(`graceSeconds must be a positive integer, got ${graceSeconds}`);
  }
  if (!(await cache.waitReady(Math.max(2000, config.serve.redisTimeoutMs * 4)))) {
    throw new CacheUnavailableError(`cannot publish set '${set}': the cache is not reachable`);
  }
  const t0 = performance.now();
  const lockKey = `larder.publish.${db.schema}.${set}`;
  return db.session(async (s) => {
    await s.query('SELECT pg_advisory_lock(hashtext($1))', [lockKey]);
    try {
      // Under the lock, a 'running' row of this set belongs to a publisher that died.
      await s.query(
        `UPDATE publishes SET status = 'abandoned', finished_at = now(),
           message = 'the publisher stopped before finishing' WHERE set_name = $1 AND status = 'running'`,
        [set],
      );
      const entry = await findSnapshot(s, set, opts.cutoff);
      const publishId = Number(
        (
          await s.query<{ id: number }>(
            `INSERT INTO publishes (set_name, cutoff, snapshot_id, status) VALUES ($1, $2::date, $3, 'running')
             RETURNING publish_id AS id`,
            [set, entry.cutoff, entry.snapshotId],
          )
        ).rows[0]!.id,
      );
      try {
        const out = await writeVersion(s, cache, config, entry, graceSeconds, opts);
        await s.query(
          `UPDATE publishes SET status = 'done', version = $2, keys = $3, bytes = $4, finished_at = now()
           WHERE publish_id = $1`,
          [publishId, out.version, out.keys, out.bytes],
        );
        return { publishId, set, cutoff: entry.cutoff, ...out, seconds: (performance.now() - t0) / 1000 };
      } catch (err) {
        await s
          .query(
            `UPDATE publishes SET status = 'failed', finished_at = now(), message = $2 WHERE publish_id = $1`,
            [publishId, (err as Error).message],
          )
          .catch(() => {});
        throw err;
      }
    } finally {
      await s.query('SELECT pg_advisory_unlock(hashtext($1))', [lockKey]).catch(() => {});
    }
  });
}

function safeIdentOrUsage(set: string): string {
  try {
    return safeIdent(set, 'set name');
  } catch (err) {
    throw new UsageError((err as Error).message);
  }
}

interface Written {
  readonly version: number;
  readonly keys: number;
  readonly bytes: number;
  readonly carried: number;
  readonly previous: number | null;
  readonly timings: PublishTimings;
}

async function writeVersion(
  s: DbSession,
  cache: FeatureCache,
  config: Config,
  entry: SnapshotEntry,
  graceSeconds: number,
  opts: PublishOptions,
): Promise<Written> {
  const onProgress = opts.onProgress;
  const layout = new KeyLayout(config.redis.prefix);
  const set = entry.set;
  const H = entry.horizon;
  const F = entry.columns.length;
  const firstDay = parseDay(entry.cutoff)! + 1;
  const pendingMs = config.serve.pendingSeconds * 1000;
  const t0 = performance.now();
  let writeMs = 0;
  // Under the publish lock the pointer cannot move between this look and the switch.
  const carry = opts.carry === false ? null : await planCarry(s, cache, layout, entry);
  const version = await cache.incr(layout.sequence(set));

  const names = new Map<number, { item: string; store: string }>();
  for (const r of (
    await s.query<{ id: number; item: string; store: string }>(
      'SELECT series_id AS id, item_id AS item, store_id AS store FROM series',
    )
  ).rows) {
    names.set(r.id, { item: r.item, store: r.store });
  }

  const roundSize = Math.max(1, Math.min(WRITE_BATCH, Math.ceil(names.size / ROUNDS)));
  const where = `snapshot ${set} ${entry.cutoff} (table ${entry.tableName})`;
  // Rows arrive in table order, which a scan does not promise: each series' matrix fills by day
  // and is written once all its rows are in, so memory holds only the series still incomplete.
  // A carried series needs only its rows after the kept days; the kept ones are then copied from
  // its vector in the previous version, a batch of series at a time.
  const open = new Map<number, { values: Float32Array; seen: Uint8Array; count: number }>();
  const byStore = new Map<string, string[]>();
  const seriesKeys: string[] = [];
  let batch: CacheEntry[] = [];
  let bytes = 0;
  let carryMs = 0;
  let carried = 0;
  const kept = carry?.days ?? 0;
  /** Series read whole although not recomputed: their previous vector was missing. */
  const whole = new Set<number>();
  const carries = (id: number) => carry !== null && !carry.recomputed.has(id) && !whole.has(id);
  let pending: Array<{ id: number; values: Float32Array }> = [];
  // Cache rounds overlap: a batch is sent while the next is read and packed, and the carried
  // vectors of one batch are fetched while the previous one is merged and written.
  const writes = new Lanes(WRITES_IN_FLIGHT);
  const flush = async () => {
    if (batch.length === 0) return;
    const done = seriesKeys.length;
    const sent = cache.setMany(batch, pendingMs);
    batch = [];
    await writes.add(onProgress ? sent.then(() => onProgress(done)) : sent);
  };
  const nameOf = (id: number) => {
    const name = names.get(id);
    if (!name) throw new LarderError('SNAPSHOT_INVALID', `${where}: series ${id} is not in the series table`);
    return name;
  };
  const emit = async (id: number, values: Float32Array) => {
    const name = nameOf(id);
    const key = layout.series(set, version, name.store, name.item);
    const packed = LITTLE_ENDIAN_HOST ? Buffer.from(values.buffer) : packMatrix(values);
    batch.push([key, packed]);
    seriesKeys.push(key);
    bytes += packed.byteLength;
    pushTo(byStore, name.store, name.item);
    if (batch.length >= roundSize) await flush();
  };
  const fetching: Array<{ list: typeof pending; got: Promise<PackedBatch> }> = [];
  /** Asks for the previous vectors of the pending series; merges the oldest batch asked for once `upTo` are waiting. */
  const mergeCarried = async (upTo: number) => {
    if (carry && pending.length > 0) {
      const list = pending;
      pending = [];
      const got = cache.getPacked(
        list.map(({ id }) => {
          const name = nameOf(id);
          return layout.series(set, carry.fromVersion, name.store, name.item);
        }),
        H * F,
      );
      got.catch(() => {}); // awaited in order below; a failure must not go unhandled meanwhile
      fetching.push({ list, got });
    }
    while (fetching.length > upTo) await mergeBatch(fetching.shift()!);
  };
  const mergeBatch = async ({ list, got: asked }: (typeof fetching)[number]) => {
    if (!carry) return;
    const tc = performance.now();
    const got = await asked;
    carryMs += performance.now() - tc;
    for (let i = 0; i < list.length; i++) {
      const { id, values } = list[i]!;
      if (!got.found[i]) {
        whole.add(id); // read again in full below
        continue;
      }
      const from = (i * H + carry.offset) * F;
      values.set(got.values.subarray(from, from + kept * F), 0);
      carried++;
      await emit(id, values);
    }
  };
  // A partial index on the prediction rows serves both this COPY and the reader's fallback
  // (series and day lookups): without it every fallback batch would scan the whole snapshot,
  // training rows included. Built once per snapshot table; a rebuilt table gets its own.
  await s.exec(
    `CREATE INDEX IF NOT EXISTS ${quoteIdent(predictIndexName(entry.tableName))}
     ON ${quoteIdent(entry.tableName)} (series_id, day) WHERE is_predict`,
  );
  // The planner's cost for 40-odd float8 columns crosses the JIT threshold, and compiling the
  // row deforming took longer than the whole read of the prediction rows.
  await s.exec('SET jit = off');
  // Nothing has analysed a just-built table, so the planner guesses half its rows are prediction
  // rows and scans all of it; they are a horizon's worth per series (a few percent), and the
  // partial index reads only their pages: measured 0.23 s instead of 1.77 s on a 1.7 GB snapshot,
  // 1.2 s instead of 3.6 s on the 57M-row chain's 8.8 GB one.
  // The bitmap of those pages stays exact (not lossy, which rechecks whole pages) in 64 MB.
  await s.exec('SET enable_seqscan = off');
  await s.exec("SET work_mem = '64MB'");
  const cols = entry.columns.map((c) => quoteIdent(c.name)).join(', ');
  const ids = (xs: Iterable<number>) => `'{${[...xs].join(',')}}'::int4[]`;
  const readRows = async (filter: string) => {
    const copy = `COPY (SELECT series_id, day${F ? `, ${cols}` : ''} FROM ${quoteIdent(entry.tableName)}
      WHERE is_predict AND ${filter}) TO STDOUT (FORMAT binary)`;
    const source = drainable(s.copyTo(copy));
    try {
      for await (const b of readPredictRows(source, F)) {
        const sids = b.seriesIds;
        const days = b.days;
        for (let r = 0; r < b.length; r++) {
          const id = sids[r]!;
          const h = days[r]! - firstDay;
          const carrying = carries(id);
          if (h < (carrying ? kept : 0) || h >= H) {
            throw new LarderError(
              'SNAPSHOT_INVALID',
              `${where}: series ${id} has a prediction row for ${formatDay(days[r]!)}, outside ${formatDay(firstDay)} .. ${formatDay(firstDay + H - 1)}`,
            );
          }
          let m = open.get(id);
          if (!m) {
            m = { values: new Float32Array(H * F), seen: new Uint8Array(H), count: 0 };
            open.set(id, m);
          }
          if (m.seen[h]) {
            throw new LarderError(
              'SNAPSHOT_INVALID',
              `${where}: series ${id} has two prediction rows for ${formatDay(days[r]!)}`,
            );
          }
          m.seen[h] = 1;
          m.values.set(b.values.subarray(r * F, (r + 1) * F), h * F);
          if (++m.count < (carrying ? H - kept : H)) continue;
          open.delete(id);
          if (carrying) {
            pending.push({ id, values: m.values });
            if (pending.length >= roundSize) await mergeCarried(FETCHES_IN_FLIGHT);
          } else await emit(id, m.values);
        }
      }
    } catch (err) {
      // The session runs more statements after this one (recording the failure): finish the COPY.
      await source.drain();
      throw err;
    }
  };
  try {
    if (!carry) await readRows('true');
    else {
      // The days after the kept ones for every series, and every day of the recomputed ones.
      await readRows(
        `(day > DATE '${formatDay(carry.keptUntil)}' OR series_id = ANY(${ids(carry.recomputed)}))`,
      );
      await mergeCarried(0);
      // A previous vector that was not there (evicted): that series is read whole.
      if (whole.size > 0) {
        await readRows(`series_id = ANY(${ids(whole)})`);
      }
    }
  } finally {
    await s.exec('RESET jit; RESET enable_seqscan; RESET work_mem').catch(() => {}); // a broken connection keeps the first error
  }
  await flush();
  await writes.drain();
  writeMs = writes.waitedMs;
  if (open.size > 0) {
    const [id, m] = open.entries().next().value!;
    throw new LarderError(
      'SNAPSHOT_INVALID',
      `${where}: ${open.size} series lack prediction rows (series ${id} has ${m.count} of ${carries(id) ? `the ${H - kept} read` : H})`,
    );
  }
  if (seriesKeys.length === 0) throw new LarderError('SNAPSHOT_INVALID', `${where}: no prediction rows`);

  const stores: ManifestStore[] = [...byStore].map(([store, items]) => ({ store, series: items.length }));
  const meta: CacheEntry[] = [...byStore].map(([store, items]) => [
    layout.storeIndex(set, version, store),
    items.join('\n'),
  ]);
  const manifest: Manifest = {
    format: 1,
    set,
    version,
    cutoff: entry.cutoff,
    horizon: H,
    mode: entry.mode,
    definitionHash: entry.definitionHash,
    snapshotId: entry.snapshotId,
    columns: entry.columns.map((c) => ({
      name: c.name,
      type: c.type,
      ...(c.family ? { family: c.family } : {}),
    })),
    firstDay: formatDay(firstDay),
    series: seriesKeys.length,
    stores,
    publishedAt: new Date().toISOString(),
  };
  meta.push([layout.manifest(set, version), JSON.stringify(manifest)]);
  await cache.setMany(meta, pendingMs);
  for (const [, v] of meta) bytes += Buffer.byteLength(v);
  const t1 = performance.now();

  // Count back what landed before anything points at it.
  const metaKeys = meta.map(([k]) => k);
  const found = (await cache.countExisting(seriesKeys)) + (await cache.countExisting(metaKeys));
  const expected = seriesKeys.length + metaKeys.length;
  if (found !== expected) {
    throw new LarderError(
      'PUBLISH_INCOMPLETE',
      `version ${version} of set '${set}': wrote ${expected} keys, found ${found}`,
    );
  }
  const persisted = (await cache.persistMany(metaKeys)) + (await cache.persistMany(seriesKeys));
  if (persisted !== expected) {
    throw new LarderError(
      'PUBLISH_INCOMPLETE',
      `version ${version} of set '${set}': ${expected - persisted} keys expired before the switch`,
    );
  }
  const t2 = performance.now();
  const prev = await cache.swap(layout.pointer(set), String(version));
  const previous = prev === null ? null : Number(prev);
  if (previous !== null && previous !== version)
    await expireVersion(cache, layout, set, previous, graceSeconds);
  const t3 = performance.now();
  const timings = {
    readMs: Math.round(t1 - t0 - writeMs - carryMs),
    carryMs: Math.round(carryMs),
    writeMs: Math.round(writeMs),
    verifyMs: Math.round(t2 - t1),
    switchMs: Math.round(t3 - t2),
  };
  return { version, keys: seriesKeys.length, bytes, carried, previous, timings };
}

/** The name of the prediction-row index of a snapshot table (within the 63-byte limit). */
export function predictIndexName(table: string): string {
  const h = createHash('sha256').update(table).digest('hex').slice(0, 8);
  return `${table.slice(0, 40)}_${h}_predict`;
}

/** Gives every key of an old version the grace expiry (found through its manifest and store indexes). */
export async function expireVersion(
  cache: FeatureCache,
  layout: KeyLayout,
  set: string,
  version: number,
  seconds: number,
): Promise<number> {
  const manifestKey = layout.manifest(set, version);
  const text = await cache.getString(manifestKey);
  if (text === null) return 0;
  const manifest = parseManifest(text, manifestKey);
  const indexKeys = manifest.stores.map((st) => layout.storeIndex(set, version, st.store));
  const lists = await cache.getStrings(indexKeys);
  const keys: string[] = [];
  manifest.stores.forEach((st, i) => {
    for (const item of splitItems(lists[i] ?? '')) keys.push(layout.series(set, version, st.store, item));
  });
  // Series first, manifest last: while the manifest lives the version can still be found.
  await cache.expireMany(keys, seconds);
  await cache.expireMany([...indexKeys, manifestKey], seconds);
  return keys.length;
}
