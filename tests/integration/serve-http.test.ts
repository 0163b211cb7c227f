import type { AddressInfo } from 'node:net';
import type { FastifyInstance } from 'fastify';
import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parseConfig } from '../../src/config/config.js';
import type { FeatureCache } from '../../src/publish/feature-cache.js';
import { KeyLayout } from '../../src/publish/layout.js';
import { publishSnapshot } from '../../src/publish/publish-snapshot.js';
import { createRedisCache } from '../../src/publish/redis-cache.js';
import { buildServer } from '../../src/serve/http-server.js';
import { createReader, type Reader } from '../../src/serve/reader.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { redisServerUrl } from '../helpers/servers.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

const prefix = schemaFor(import.meta.url);
const env = useTestDb(import.meta.url, { redis: { prefix } });
const TOKEN = 'http-test-token-abcdefghijklmnop';
const OTHER = 'second-token-qrstuvwxyz-0123456';
let raw: Redis;
let cache: FeatureCache;
let reader: Reader;
let app: FastifyInstance;
let base: string;
let fx: SnapshotFixture;

beforeAll(async () => {
  const url = await redisServerUrl();
  raw = new Redis(url);
  cache = createRedisCache({ url, commandTimeoutMs: 10_000 });
  await cache.waitReady(5000);
  fx = await createSnapshotFixture(env().db, { cutoff: '2024-08-04', seed: 3, stores: 2, itemsPerStore: 10 });
  const config = parseConfig(
    { database: { schema: env().schema }, redis: { prefix }, serve: { tokens: [TOKEN], batchLimit: 5 } },
    'test',
    { LARDER_TOKENS: ` ${OTHER} ,` },
  );
  await publishSnapshot(env().db, cache, config, { set: 'daily', cutoff: fx.cutoff });
  // No background loading of the copies: the 503 test below needs a series no read has copied.
  reader = await createReader({ config, cache, db: env().db, warmNearCache: false });
  app = buildServer({ reader, config, logLevel: 'silent' });
  await app.listen({ port: 0, host: '127.0.0.1' });
  base = `http://127.0.0.1:${(app.server.address() as AddressInfo).port}`;
});

afterAll(async () => {
  await app?.close();
  await reader?.close();
  const keys = await raw.keys(`${prefix}:*`);
  if (keys.length) await raw.del(...keys);
  raw.disconnect();
  await cache?.close();
});

interface Res {
  status: number;
  text: string;
  body: Record<string, unknown>;
}
async function call(path: string, init: RequestInit & { token?: string | null } = {}): Promise<Res> {
  const headers = new Headers(init.headers);
  const token = init.token === undefined ? TOKEN : init.token;
  if (token !== null) headers.set('authorization', `Bearer ${token}`);
  if (init.body) headers.set('content-type', 'application/json');
  const res = await fetch(`${base}${path}`, { ...init, headers });
  const text = await res.text();
  let body: Record<string, unknown> = {};
  try {
    body = JSON.parse(text);
  } catch {}
  return { status: res.status, text, body };
}

/** No response may leak internals: stack frames, source paths or SQL. */
function expectClean(r: Res): void {
  expect(r.text).not.toMatch(/\n\s+at |\.ts:\d+|node_modules|SELECT |FROM |JOIN |unnest|features_daily/i);
}

const s0 = () => fx.series[0]!;
const q = (o: Record<string, string>) => `?${new URLSearchParams(o)}`;

describe('auth', () => {
  it('leaves /health open and closes everything else, /metrics included', async () => {
    const h = await call('/health', { token: null });
    expect(h.status).toBe(200);
    expect(h.body).toEqual({ status: 'ok', cache: 'ready' });
    for (const path of [
      '/metrics',
      '/v1/sets/daily',
      `/v1/sets/daily/features${q({ item: 'x', store: 'y' })}`,
      '/nope',
    ]) {
      const r = await call(path, { token: null });
      expect(r.status, path).toBe(401);
      expect(r.body.message).toMatch(/valid bearer token is required/);
    }
  });

  it('refuses a wrong token, a prefix of the right one, and other schemes', async () => {
    for (const token of ['wrong-token-wrong-token-wrong', TOKEN.slice(0, -1), `${TOKEN}x`, '']) {
      expect((await call('/v1/sets/daily', { token })).status, token).toBe(401);
    }
    const basic = await fetch(`${base}/v1/sets/daily`, { headers: { authorization: `Basic ${TOKEN}` } });
    expect(basic.status).toBe(401);
    expect(basic.headers.get('www-authenticate')).toBe('Bearer');
  });

  it('accepts the configured token and one from LARDER_TOKENS', async () => {
    expect((await call('/v1/sets/daily')).status).toBe(200);
    expect((await call('/v1/sets/daily', { token: OTHER })).status).toBe(200);
  });
});

describe('reads', () => {
  it('serves one series, one day of it, a set description and a batch', async () => {
    const one = await call(`/v1/sets/daily/features${q({ item: s0().item, store: s0().store })}`);
    expect(one.status).toBe(200);
    expect(one.body).toMatchObject({ set: 'daily', source: 'cache', cutoff: fx.cutoff });
    expect(one.body.rows).toHaveLength(28);
    const day = await call(
      `/v1/sets/daily/features${q({ item: s0().item, store: s0().store, day: '2024-08-06' })}`,
    );
    expect(day.body.rows).toEqual([(one.body.rows as unknown[])[1]]);
    const info = await call('/v1/sets/daily');
    expect(info.body).toMatchObject({
      set: 'daily',
      cutoff: fx.cutoff,
      horizon: 28,
      series: 20,
      firstDay: '2024-08-05',
    });
    const batch = await call('/v1/sets/daily/features/batch', {
      method: 'POST',
      body: JSON.stringify({ series: fx.series.slice(0, 5).map((s) => ({ item: s.item, store: s.store })) }),
    });
    expect(batch.status).toBe(200);
    expect(batch.body.results).toHaveLength(5);
  });

  it('serves the packed matrix of a series, equal to the named read', async () => {
    const s = fx.series[4]!;
    const res = await fetch(`${base}/v1/sets/daily/vector${q({ item: s.item, store: s.store })}`, {
      headers: { authorization: `Bearer ${TOKEN}` },
    });
    expect(res.status).toBe(200);
    expect(res.headers.get('content-type')).toBe('application/octet-stream');
    expect(res.headers.get('x-larder-shape')).toBe(`28x${fx.columns.length}`);
    expect(res.headers.get('x-larder-first-day')).toBe('2024-08-05');
    expect(res.headers.get('x-larder-source')).toBe('cache');
    const bytes = new Uint8Array(await res.arrayBuffer());
    expect(bytes.byteLength).toBe(28 * fx.columns.length * 4);
    const dv = new DataView(bytes.buffer);
    const named = await call(`/v1/sets/daily/features${q({ item: s.item, store: s.store })}`);
    const rows = named.body.rows as { features: Record<string, number | null> }[];
    rows.forEach((row, h) => {
      fx.columns.forEach((c, f) => {
        const x = dv.getFloat32((h * fx.columns.length + f) * 4, true);
        expect(Number.isNaN(x) ? null : x).toBe(row.features[c]);
      });
    });
    const unknown = await call(`/v1/sets/daily/vector${q({ item: 'GHOST-5', store: 'ST-001' })}`);
    expect(unknown.status).toBe(404);
    expect(unknown.body.message).toMatch(/no series item 'GHOST-5' at store 'ST-001'/);
  });

  it('exposes Prometheus metrics behind auth', async () => {
    const m = await call('/metrics');
    expect(m.status).toBe(200);
    expect(m.text).toMatch(
      /larder_http_requests_total\{route="\/v1\/sets\/:set\/features",method="GET",status="200"\} \d+/,
    );
    expect(m.text).toMatch(/larder_http_request_duration_seconds_bucket\{le="0.001",route=/);
    expect(m.text).toMatch(/larder_errors_total\{code="UNAUTHORIZED"\} \d+/);
    expect(m.text).toContain('larder_fallbacks_total{reason="miss"}');
  });
});

describe('errors are 400/404 with a message and no internals', () => {
  const cases: [string, string, RequestInit, number, RegExp][] = [
    [
      'unknown set',
      `/v1/sets/weekly/features${q({ item: 'a', store: 'b' })}`,
      {},
      404,
      /set 'weekly' is not published/,
    ],
    [
      'bad set name',
      `/v1/sets/Weekly/features${q({ item: 'a', store: 'b' })}`,
      {},
      400,
      /set: a set name matching/,
    ],
    [
      'day not a date',
      `/v1/sets/daily/features${q({ item: 'a', store: 'b', day: '08/05/2024' })}`,
      {},
      400,
      /day: a day YYYY-MM-DD/,
    ],
    [
      'day does not exist',
      `/v1/sets/daily/features${q({ item: 'a', store: 'b', day: '2024-02-30' })}`,
      {},
      400,
      /day '2024-02-30' is not a valid day/,
    ],
    [
      'day not served',
      `/v1/sets/daily/features${q({ item: 'a', store: 'b', day: '2024-09-30' })}`,
      {},
      400,
      /day 2024-09-30 is not served by set 'daily' \(version \d+\): days 2024-08-05 \.\. 2024-09-01/,
    ],
    [
      'unknown series',
      `/v1/sets/daily/features${q({ item: 'GHOST-1', store: 'ST-001' })}`,
      {},
      404,
      /set 'daily' has no series item 'GHOST-1' at store 'ST-001'/,
    ],
    ['missing item', `/v1/sets/daily/features${q({ store: 'ST-001' })}`, {}, 400, /item: item is required/],
    [
      'unknown parameter',
      `/v1/sets/daily/features${q({ item: 'a', store: 'b', dya: 'x' })}`,
      {},
      400,
      /Unrecognized key.*dya/,
    ],
    ['no route', '/v2/anything', {}, 404, /no route GET \/v2\/anything/],
    [
      'over-limit batch',
      '/v1/sets/daily/features/batch',
      {
        method: 'POST',
        body: JSON.stringify({ series: Array.from({ length: 6 }, () => ({ item: 'a', store: 'b' })) }),
      },
      400,
      /batch of 6 series is over the limit of 5/,
    ],
    [
      'empty batch',
      '/v1/sets/daily/features/batch',
      { method: 'POST', body: JSON.stringify({ series: [] }) },
      400,
      /series: Too small/,
    ],
    [
      'batch entry bad',
      '/v1/sets/daily/features/batch',
      { method: 'POST', body: JSON.stringify({ series: [{ item: 'a' }] }) },
      400,
      /series.0.store: store is required/,
    ],
    [
      'batch unknown series',
      '/v1/sets/daily/features/batch',
      {
        method: 'POST',
        body: JSON.stringify({
          series: [
            { item: 'GHOST-2', store: 'ST-002' },
            { item: 'GHOST-3', store: 'ST-002' },
          ],
        }),
      },
      404,
      /no series item 'GHOST-2' at store 'ST-002' \(and 1 more\)/,
    ],
    [
      'malformed JSON',
      '/v1/sets/daily/features/batch',
      { method: 'POST', body: '{"series": [' },
      400,
      /JSON/,
    ],
  ];
  for (const [name, path, init, status, message] of cases) {
    it(name, async () => {
      const r = await call(path, init);
      expect(r.status).toBe(status);
      expect(String(r.body.message)).toMatch(message);
      expect(typeof r.body.error).toBe('string');
      expectClean(r);
    });
  }

  it('a batch may ask for null in place of unknown series', async () => {
    const r = await call('/v1/sets/daily/features/batch', {
      method: 'POST',
      body: JSON.stringify({
        series: [
          { item: s0().item, store: s0().store },
          { item: 'GHOST-4', store: 'ST-001' },
        ],
        unknown: 'null',
      }),
    });
    expect(r.status).toBe(200);
    const results = r.body.results as unknown[];
    expect(results[1]).toBeNull();
    expect(results[0]).toMatchObject({ source: 'cache' });
  });

  it('a database failure during a fallback is a 503 without SQL', async () => {
    const { db } = env();
    // A series no earlier test read: one read before is answered from the reader's in-process
    // copy of the version, which deleting its key does not change.
    const s = fx.series[12]!;
    const version = Number(await raw.get(new KeyLayout(prefix).pointer('daily')));
    await raw.del(new KeyLayout(prefix).series('daily', version, s.store, s.item));
    await db.exec(`ALTER TABLE ${fx.tableName} RENAME TO moved_away`);
    try {
      const r = await call(`/v1/sets/daily/features${q({ item: s.item, store: s.store })}`);
      expect(r.status).toBe(503);
      expect(r.body.message).toMatch(/the cache could not answer and the database read failed/);
      expectClean(r);
    } finally {
      await db.exec(`ALTER TABLE moved_away RENAME TO ${fx.tableName}`);
    }
    const again = await call(`/v1/sets/daily/features${q({ item: s.item, store: s.store })}`);
    expect(again.status).toBe(200);
    expect(again.body.source).toBe('fallback');
  });
});

describe('startup', () => {
  it('refuses to serve without any token', () => {
    const config = parseConfig({ redis: { prefix } }, 'test');
    expect(() => buildServer({ reader, config })).toThrow(
      /no tokens configured: set serve.tokens in the config or LARDER_TOKENS/,
    );
  });
});
