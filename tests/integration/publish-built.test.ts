import { Redis } from 'ioredis';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { buildSnapshot } from '../../src/build/build-snapshot.js';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { KeyLayout } from '../../src/publish/layout.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import { createReader } from '../../src/serve/reader.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { redisServerUrl } from '../helpers/servers.js';
import { insertChain } from './build/chain-fixture.js';

// A snapshot from the real feature build, published and read back: every vector equals the
// table's cells as PostgreSQL rounds them to float4 (IEEE 754 binary32), NULL as NaN.
const prefix = schemaFor(import.meta.url);
const t = useTestDb(import.meta.url, {
  redis: { prefix },
  sets: [
    {
      name: 'weekly',
      horizon: 7,
      training: { days: 60 },
      families: {
        lags: { days: [7, 14] },
        windows: [{ size: 7, shift: 7, stats: ['mean', 'std'] }],
        calendar: {},
        prices: {},
      },
    },
  ],
});
const CUTOFF = '2023-07-01';
let raw: Redis;
let cache: FeatureCache;
let table = '';
let features: string[] = [];

beforeAll(async () => {
  const { db, config } = t();
  const url = await redisServerUrl();
  raw = new Redis(url);
  cache = createRedisCache({ url, commandTimeoutMs: 10_000 });
  await insertChain(db, { stores: 3, items: 6, start: '2023-01-01', days: 200 });
  const info = await buildSnapshot(db, config, { set: 'weekly', cutoff: CUTOFF });
  table = info.tableName;
  features = info.columns.map((c) => c.name);
});

afterAll(async () => {
  const keys = await raw.keys(`${prefix}:*`);
  if (keys.length) await raw.del(...keys);
  raw.disconnect();
  await cache?.close();
});

test('a built snapshot publishes cell for cell, and the reader serves it by name', async () => {
  const { db, config } = t();
  const res = await publishSnapshot(db, cache, config, { set: 'weekly', cutoff: CUTOFF });
  const cols = features.map((f) => `x."${f}"::float4 AS "${f}"`).join(', ');
  const pg = await db.query<Record<string, string | number | null>>(
    `SELECT s.item_id, s.store_id, x.day::text AS day, ${cols} FROM "${table}" x JOIN series s USING (series_id)
     WHERE x.is_predict ORDER BY s.store_id, s.item_id, x.day`,
  );
  expect(pg.rows.length).toBe(18 * 7);
  expect(res.keys).toBe(18);
  const layout = new KeyLayout(prefix);
  const reader = await createReader({ config, cache, db });
  for (let s = 0; s < 18; s++) {
    const rows = pg.rows.slice(s * 7, s * 7 + 7);
    const { item_id: item, store_id: store } = rows[0]!;
    const buf = (await raw.getBuffer(layout.series('weekly', res.version, String(store), String(item))))!;
    const dv = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
    expect(buf.byteLength).toBe(7 * features.length * 4);
    rows.forEach((r, h) => {
      features.forEach((f, j) => {
        const got = dv.getFloat32((h * features.length + j) * 4, true);
        const want = r[f] === null ? null : Math.fround(Number(r[f]));
        expect(Number.isNaN(got) ? null : got, `${store}/${item} ${r.day} ${f}`).toBe(want);
      });
    });
    const read = await reader.get({
      set: 'weekly',
      item: String(item),
      store: String(store),
      day: String(rows[3]!.day),
    });
    expect(read.source).toBe('cache');
    for (const f of features) {
      expect(read.rows[0]!.features[f]).toBe(rows[3]![f] === null ? null : Math.fround(Number(rows[3]![f])));
    }
  }
  await reader.close();
});
