import Fastify, { type FastifyInstance } from 'fastify';
import { z } from 'zod';
import type { Config } from '../config/config.js';
import { ConfigError, LarderError } from '../db/errors.js';
import { packMatrix } from '../publish/layout.js';
import { NotFoundError } from '../publish/snapshot-catalogue.js';
import { createMetrics, type ServeMetrics } from './metrics.js';
import { featureReadJson } from './read-json.js';
import type { Reader } from './reader.js';
import { createTokenCheck } from './token-check.js';

declare module 'fastify' {
  interface FastifyRequest {
    /** `performance.now()` when the request arrived (for the latency histogram). */
    startedAt: number;
  }
}

const SET_RE = /^[a-z][a-z0-9_]{0,62}$/;
const id = (what: string) =>
  z
    .string({ error: `${what} is required` })
    .min(1, `${what} must not be empty`)
    .max(64, `${what} is longer than 64 characters`)
    .regex(/^[^\p{Cc}]+$/u, `${what} must not contain control characters`);
const day = z.string().regex(/^\d{4}-\d{2}-\d{2}$/, 'a day YYYY-MM-DD');

export const setParamsSchema = z.object({
  set: z.string().regex(SET_RE, 'a set name matching ^[a-z][a-z0-9_]{0,62}$'),
});
export const featureQuerySchema = z.strictObject({
  item: id('item'),
  store: id('store'),
  day: day.optional(),
});
export type FeatureQuery = z.infer<typeof featureQuerySchema>;
export const vectorQuerySchema = z.strictObject({ item: id('item'), store: id('store') });
export const batchBodySchema = z.strictObject({
  series: z.array(z.strictObject({ item: id('item'), store: id('store'), day: day.optional() })).min(1),
  /** `error`: an unknown series fails the batch (404); `null`: its result is null. */
  unknown: z.enum(['error', 'null']).default('error'),
});
export type BatchBody = z.infer<typeof batchBodySchema>;

const ID_RE = /^[^\p{Cc}]{1,64}$/u;
const DAY_RE = /^\d{4}-\d{2}-\d{2}$/;

/**
 * The feature query when it is well formed, checked as `featureQuerySchema` checks it, or null
 * (then the schema parses it, for its messages). Nearly every read takes this path, and the
 * schema's parse cost several microseconds a request.
 */
export function wellFormedQuery(q: unknown): FeatureQuery | null {
  if (typeof q !== 'object' || q === null) return null;
  const o = q as Record<string, unknown>;
  let n = 0;
  for (const k in o) {
    if (k !== 'item' && k !== 'store' && k !== 'day') return null;
    n++;
  }
  const { item, store, day } = o;
  if (typeof item !== 'string' || !ID_RE.test(item) || typeof store !== 'string' || !ID_RE.test(store))
    return null;
  if (day === undefined) return n === 2 ? { item, store } : null;
  return typeof day === 'string' && DAY_RE.test(day) ? { item, store, day } : null;
}

export interface ServerOptions {
  readonly reader: Reader;
  readonly config: Config;
  readonly metrics?: ServeMetrics;
  /** pino level for the server's log (default `warn`: request lines are `info`, and cost latency). */
  readonly logLevel?: string;
}

const STATUS: Record<string, number> = {
  BAD_REQUEST: 400,
  USAGE: 400,
  UNKNOWN_SET: 404,
  UNKNOWN_SERIES: 404,
  UNAVAILABLE: 503,
};

/** Maps an error to a status and a message that never carries a stack trace or SQL. */
function httpError(err: unknown): { status: number; code: string; message: string } {
  if (err instanceof z.ZodError) {
    const message = err.issues
      .map((i) => `${i.path.length ? i.path.join('.') : 'request'}: ${i.message}`)
      .slice(0, 5)
      .join('; ');
    return { status: 400, code: 'BAD_REQUEST', message };
  }
  if (err instanceof LarderError && STATUS[err.code]) {
    return { status: STATUS[err.code]!, code: err.code, message: err.message };
  }
  const e = err as { statusCode?: unknown; code?: unknown; message?: unknown };
  // Fastify's own client errors (malformed JSON, body too large, wrong content type).
  if (typeof e?.statusCode === 'number' && e.statusCode >= 400 && e.statusCode < 500) {
    return { status: e.statusCode, code: 'BAD_REQUEST', message: String(e.message).slice(0, 200) };
  }
  return { status: 500, code: 'INTERNAL', message: 'internal error (see the server log)' };
}

/**
 * The feature service: JSON over HTTP with bearer-token auth on everything but `/health`.
 *   GET  /health                         open; cache state
 *   GET  /metrics                        Prometheus text
 *   GET  /v1/sets/:set                   what the set serves (version, cutoff, columns)
 *   GET  /v1/sets/:set/features?item=&store=[&day=]
 *   GET  /v1/sets/:set/vector?item=&store=   the packed H x F matrix (application/octet-stream)
 *   POST /v1/sets/:set/features/batch    { series: [{ item, store, day? }], unknown? }
 */
export function buildServer(opts: ServerOptions): FastifyInstance {
  const { reader, config } = opts;
  const tokens = config.serve.tokens;
  if (tokens.length === 0) {
    throw new ConfigError('serve: no tokens configured: set serve.tokens in the config or LARDER_TOKENS');
  }
  const metrics = opts.metrics ?? createMetrics();
  const authorized = createTokenCheck(tokens);
  const limit = config.serve.batchLimit;
  const app = Fastify({
    logger: { level: opts.logLevel ?? 'warn' },
    // The server's logger serves every request (no pino child with a request id per request:
    // at the default level nothing per request is logged, and the child cost every request).
    childLoggerFactory: (logger) => logger,
    // Room for a full batch of long ids; anything bigger is refused by Fastify with 413.
    bodyLimit: Math.max(1 << 20, limit * 512),
  });
  app.decorateRequest('startedAt', 0);

  // Hooks in callback style: an async hook costs a promise and a microtask turn per request.
  app.addHook('onRequest', (req, reply, done) => {
    req.startedAt = performance.now();
    if (req.url === '/health' || req.url.startsWith('/health?') || authorized(req.headers.authorization)) {
      done();
      return;
    }
    metrics.errors.inc({ code: 'UNAUTHORIZED' });
    reply.code(401).header('www-authenticate', 'Bearer').send({
      error: 'UNAUTHORIZED',
      message: 'a valid bearer token is required (Authorization: Bearer <token>)',
    });
  });
  // Labelled children looked up once per route and status: resolving labels is a hash of the
  // label object on every call otherwise.
  const counted = new Map<string, { inc(): void }>();
  const timed = new Map<string, { observe(v: number): void }>();
  app.addHook('onResponse', (req, reply, done) => {
    const route = req.routeOptions.url ?? 'unmatched';
    const status = reply.statusCode;
    const k = `${route} ${req.method} ${status}`;
    let c = counted.get(k);
    if (!c) {
      c = metrics.requests.labels({ route, method: req.method, status: String(status) });
      counted.set(k, c);
    }
    c.inc();
    let h = timed.get(route);
    if (!h) {
      h = metrics.latency.labels({ route });
      timed.set(route, h);
    }
    h.observe((performance.now() - req.startedAt) / 1000);
    done();
  });
  app.setErrorHandler((err, req, reply) => {
    const h = httpError(err);
    metrics.errors.inc({ code: h.code });
    if (h.status >= 500) req.log.error({ err }, 'request failed');
    return reply.code(h.status).send({ error: h.code, message: h.message });
  });
  app.setNotFoundHandler((req, reply) =>
    reply.code(404).send({ error: 'NOT_FOUND', message: `no route ${req.method} ${req.url.split('?')[0]}` }),
  );

  app.get('/health', async () => ({ status: 'ok', cache: reader.cacheReady() ? 'ready' : 'unavailable' }));
  app.get('/metrics', async (_req, reply) => {
    reply.header('content-type', metrics.registry.contentType);
    return metrics.registry.metrics();
  });
  app.get('/v1/sets/:set', async (req) => {
    const { set } = setParamsSchema.parse(req.params);
    return reader.describe(set);
  });
  // Printing the numbers is most of a full-horizon read's cost (featureReadJson).
  app.get('/v1/sets/:set/features', async (req, reply) => {
    const set = (req.params as { set?: unknown }).set;
    const q = wellFormedQuery(req.query);
    if (typeof set !== 'string' || !SET_RE.test(set) || !q) {
      setParamsSchema.parse(req.params);
      featureQuerySchema.parse(req.query);
      // Unreachable when the checks above agree with the schemas; a 400 either way.
      throw new LarderError('BAD_REQUEST', 'request: not a feature query');
    }
    const read = await reader.get({ set, item: q.item, store: q.store, day: q.day });
    return reply.type('application/json; charset=utf-8').send(featureReadJson(read));
  });
  // The whole H x F matrix as packed little-endian Float32 (the cache's own bytes): for clients
  // that want every day and can skip JSON. Columns and days come from GET /v1/sets/:set.
  app.get('/v1/sets/:set/vector', async (req, reply) => {
    const { set } = setParamsSchema.parse(req.params);
    const q = vectorQuerySchema.parse(req.query);
    const v = await reader.getVectors(set, [{ item: q.item, store: q.store }]);
    const source = v.sources[0];
    if (!source) {
      throw new NotFoundError(
        'UNKNOWN_SERIES',
        `set '${set}' has no series item '${q.item}' at store '${q.store}'`,
      );
    }
    return reply
      .type('application/octet-stream')
      .header('x-larder-version', String(v.version))
      .header('x-larder-cutoff', v.cutoff)
      .header('x-larder-first-day', v.firstDay)
      .header('x-larder-shape', `${v.horizon}x${v.columns.length}`)
      .header('x-larder-source', source)
      .send(packMatrix(v.values));
  });
  app.post('/v1/sets/:set/features/batch', async (req, reply) => {
    const { set } = setParamsSchema.parse(req.params);
    const series = (req.body as { series?: unknown } | null)?.series;
    // Refuse an oversized batch before validating each of its entries.
    if (Array.isArray(series) && series.length > limit) {
      throw new LarderError('BAD_REQUEST', `batch of ${series.length} series is over the limit of ${limit}`);
    }
    const body = batchBodySchema.parse(req.body);
    const results = await reader.getMany(
      body.series.map((s) => ({ set, item: s.item, store: s.store, day: s.day })),
      { unknown: body.unknown },
    );
    const json = results.map((r) => (r ? featureReadJson(r) : 'null')).join(',');
    return reply.type('application/json; charset=utf-8').send(`{"results":[${json}]}`);
  });
  return app;
}
