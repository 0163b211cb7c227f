import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parseConfig } from '../../src/config/config.js';
import type { Db } from '../../src/db/database.js';
import { migrate } from '../../src/db/migrate.js';
import { openPgliteDatabase } from '../../src/db/pglite-database.js';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { KeyLayout } from '../../src/publish/layout.js';
import { createMemoryCache } from '../../src/publish/memory-cache.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createReader } from '../../src/serve/reader.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

// The embedded demo's path: PGlite (in memory) and the in-process cache, no servers at all.
let db: Db;
let fx: SnapshotFixture;
const config = parseConfig({ redis: { prefix: 'embedded_test' } }, 'test');

beforeAll(async () => {
  db = await openPgliteDatabase(undefined, 'larder');
  await migrate(db);
  fx = await createSnapshotFixture(db, { cutoff: '2024-10-06', seed: 9, stores: 2, itemsPerStore: 8 });
});
afterAll(async () => db?.close());

describe('publish and read on the embedded database', () => {
  it('publishes to the in-process cache and reads from it, falling back to PGlite on a miss', async () => {
    const cache = createMemoryCache('embedded-test');
    const res = await publishSnapshot(db, cache, config, { set: 'daily', cutoff: fx.cutoff });
    expect(res.keys).toBe(16);
    const reader = await createReader({ config, cache, db });
    const s = fx.series[4]!;
    const hit = await reader.get({ set: 'daily', item: s.item, store: s.store, day: '2024-10-08' });
    expect(hit.source).toBe('cache');
    // The value PostgreSQL itself rounds to float4 (IEEE 754 binary32, round to nearest).
    const col = fx.columns[2]!;
    const ref = await db.query<{ v: number | null }>(
      `SELECT ${col}::float4 AS v FROM ${fx.tableName} WHERE series_id = $1 AND day = '2024-10-08'`,
      [s.id],
    );
    const v = ref.rows[0]!.v;
    expect(hit.rows[0]!.features[col]).toBe(v === null ? null : Math.fround(Number(v)));
    await cache.deleteMany([`embedded_test:{daily:${res.version}:${s.store}}:s:${s.item}`]);
    const miss = await reader.get({ set: 'daily', item: s.item, store: s.store, day: '2024-10-08' });
    expect(miss.source).toBe('fallback');
    expect(miss.rows).toEqual(hit.rows);
  });

  it('a cache round that fails while later rounds are under way fails the publish with its error', async () => {
    const cache = createMemoryCache('embedded-failing');
    const pointer = new KeyLayout('embedded_test').pointer('daily');
    let rounds = 0;
    let failAt = 0;
    const counting: FeatureCache = {
      ...cache,
      setMany: (entries, ttl) => {
        rounds++;
        if (rounds !== failAt) return cache.setMany(entries, ttl);
        const n = rounds;
        return new Promise((_, reject) => setTimeout(() => reject(new Error(`round ${n} refused`)), 20));
      },
    };
    const first = await publishSnapshot(db, counting, config, { set: 'daily', cutoff: fx.cutoff });
    // The series go in several rounds, then one of store indexes and the manifest.
    const total = rounds;
    expect(total).toBeGreaterThan(3);
    // A middle round, and the last round of series (nothing is sent after it that could fail).
    for (const at of [2, total - 1]) {
      rounds = 0;
      failAt = at;
      await expect(
        publishSnapshot(db, counting, config, { set: 'daily', cutoff: fx.cutoff }),
      ).rejects.toThrow(`round ${at} refused`);
      expect(await cache.getString(pointer)).toBe(String(first.version));
    }
  });
});
