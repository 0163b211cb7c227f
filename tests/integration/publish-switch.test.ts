import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { KeyLayout } from '../../src/publish/layout.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import type { SeriesBatch } from '../../src/serve/read-types.js';
import { createReader, type Reader } from '../../src/serve/reader.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { databaseUrl, redisServerUrl } from '../helpers/servers.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

const prefix = schemaFor(import.meta.url);
const env = useTestDb(import.meta.url, { redis: { prefix } });
const layout = new KeyLayout(prefix);
let raw: Redis;
let cache: FeatureCache;
let reader: Reader;
let url: string;
/** Three snapshots with different values, so any mix of versions shows. */
const fx: SnapshotFixture[] = [];

beforeAll(async () => {
  url = await redisServerUrl();
  raw = new Redis(url);
  cache = createRedisCache({ url, commandTimeoutMs: 10_000 });
  await cache.waitReady(5000);
  for (const [i, cutoff] of ['2024-06-02', '2024-06-09', '2024-06-16'].entries()) {
    fx.push(
      await createSnapshotFixture(env().db, {
        cutoff,
        seed: 40 + i,
        stores: 4,
        itemsPerStore: 250,
        features: 12,
      }),
    );
  }
  reader = await createReader({ config: env().config, cache, db: env().db, pointerCacheMs: 0 });
});

afterAll(async () => {
  await reader?.close();
  const keys = await raw.keys(`${prefix}:*`);
  for (let i = 0; i < keys.length; i += 1000) await raw.del(...keys.slice(i, i + 1000));
  raw.disconnect();
  await cache?.close();
});

/** First feature of the first served day for each series of a fixture, as the cache holds it. */
async function firstCells(f: SnapshotFixture): Promise<Map<string, number | null>> {
  const col = f.columns[0]!;
  const { rows } = await env().db.query<{ k: string; v: number | null }>(
    `SELECT s.store_id || '|' || s.item_id AS k, t.${col}::float4 AS v FROM ${f.tableName} t
     JOIN series s USING (series_id) WHERE t.is_predict AND t.day = $1::date + 1`,
    [f.cutoff],
  );
  return new Map(rows.map((r) => [r.k, r.v === null ? null : Math.fround(Number(r.v))]));
}

describe('pointer switch', () => {
  it('a reader looping during a publish sees one whole version at a time, never a mix', async () => {
    const { db, config } = env();
    const before = await publishSnapshot(db, cache, config, { set: 'daily', cutoff: fx[0]!.cutoff });
    const expected = new Map<string, Map<string, number | null>>();
    for (const f of fx.slice(0, 2)) expected.set(f.cutoff, await firstCells(f));
    const sample = fx[0]!.series.filter((_, i) => i % 5 === 0);
    const reqs = sample.map((s) => ({ set: 'daily', item: s.item, store: s.store }));
    const seen: number[] = [];
    let done = false;
    let loops = 0;
    const loop = (async () => {
      while (!done || loops < 3) {
        const reads = await reader.getMany(reqs);
        const versions = new Set(reads.map((r) => r.version));
        expect(versions.size, 'one version per read').toBe(1);
        const r0 = reads[0]!;
        expect(reads.every((r) => r.source === 'cache' && r.cutoff === r0.cutoff)).toBe(true);
        const want = expected.get(r0.cutoff)!;
        for (const r of reads) {
          expect(r.rows).toHaveLength(28);
          expect(r.rows[0]!.features[fx[0]!.columns[0]!], `${r.store}|${r.item}`).toBe(
            want.get(`${r.store}|${r.item}`),
          );
        }
        if (seen.at(-1) !== r0.version) seen.push(r0.version);
        loops++;
      }
    })();
    const after = await publishSnapshot(db, cache, config, { set: 'daily', cutoff: fx[1]!.cutoff });
    done = true;
    await loop;
    expect(loops).toBeGreaterThan(3);
    // Versions only move forward, from the old one to the new one.
    expect(seen[0]).toBe(before.version);
    expect(seen.at(-1)).toBe(after.version);
    expect(seen).toEqual([...new Set(seen)].sort((x, y) => x - y));
  });

  it('readAll during a publish streams the version current at its start, whole', async () => {
    const { db, config } = env();
    const at = await reader.describe('daily');
    const want = await firstCells(fx.find((f) => f.cutoff === at.cutoff)!);
    const iter = reader.readAll({ set: 'daily', batchSize: 50, inflight: 2 });
    const first = await iter.next();
    const publishing = publishSnapshot(db, cache, config, {
      set: 'daily',
      cutoff: fx[2]!.cutoff,
      graceSeconds: 60,
    });
    let n = 0;
    const check = (b: SeriesBatch) => {
      expect(b.version).toBe(at.version);
      const stride = b.horizon * b.columns.length;
      b.items.forEach((item, i) => {
        const v = b.values[i * stride]!;
        expect(Number.isNaN(v) ? null : v).toBe(want.get(`${b.stores[i]}|${item}`));
      });
      n += b.items.length;
    };
    check(first.value as SeriesBatch);
    for (let r = await iter.next(); !r.done; r = await iter.next()) check(r.value);
    await publishing;
    expect(n).toBe(fx[0]!.series.length);
  });
});

describe('publisher killed mid-write', () => {
  it('leaves the previous version current and complete; the next publish succeeds', async () => {
    const { db, config, schema } = env();
    const current = Number(await raw.get(layout.pointer('daily')));
    const cur = await reader.describe('daily');
    const child = spawn(
      process.execPath,
      ['--import', 'tsx', fileURLToPath(new URL('./fixtures/publish-child.ts', import.meta.url))],
      {
        env: {
          ...process.env,
          DATABASE_URL: await databaseUrl(),
          REDIS_URL: url,
          LARDER_SCHEMA: schema,
          PREFIX: prefix,
          SET: 'daily',
          CUTOFF: fx[0]!.cutoff,
        },
        stdio: ['ignore', 'pipe', 'inherit'],
      },
    );
    const exited = new Promise<NodeJS.Signals | null>((r) => child.once('exit', (_c, sig) => r(sig)));
    await new Promise<void>((resolve, reject) => {
      child.stdout!.on('data', (d: Buffer) => d.toString().includes('mid-write') && resolve());
      child.once('exit', () => reject(new Error('publisher exited before reaching mid-write')));
    });
    const partial = current + 1;
    const s0 = fx[0]!.series[0]!;
    expect(await raw.exists(layout.series('daily', partial, s0.store, s0.item))).toBe(1);
    child.kill('SIGKILL');
    expect(await exited).toBe('SIGKILL');

    expect(Number(await raw.get(layout.pointer('daily')))).toBe(current);
    // The current version is whole: every series answers from the cache with its own cutoff.
    const all = fx[0]!.series.map((s) => ({ set: 'daily', item: s.item, store: s.store }));
    const reads = await reader.getMany(all);
    expect(reads.every((r) => r.source === 'cache' && r.version === current && r.cutoff === cur.cutoff)).toBe(
      true,
    );
    // The partial version never became current and expires by itself.
    const ttl = await raw.pttl(layout.series('daily', partial, s0.store, s0.item));
    expect(ttl).toBeGreaterThan(0);
    expect(ttl).toBeLessThanOrEqual(config.serve.pendingSeconds * 1000);
    expect(await raw.exists(layout.manifest('daily', partial))).toBe(0);

    const next = await publishSnapshot(db, cache, config, { set: 'daily', cutoff: fx[0]!.cutoff });
    expect(next.version).toBe(partial + 1);
    expect(next.keys).toBe(fx[0]!.series.length);
    const statuses = await db.query<{ status: string }>(
      'SELECT status FROM publishes ORDER BY publish_id DESC LIMIT 2',
    );
    expect(statuses.rows.map((r) => r.status)).toEqual(['done', 'abandoned']);
    const r = await reader.get({ set: 'daily', item: s0.item, store: s0.store });
    expect(r).toMatchObject({ source: 'cache', version: next.version, cutoff: fx[0]!.cutoff });
  });
});
