import { Counter, collectDefaultMetrics, Histogram, Registry } from 'prom-client';
import type { FallbackReason, ReaderEvents } from './read-types.js';

/** The service's Prometheus metrics, on a registry of its own (several servers may share a process). */
export interface ServeMetrics {
  readonly registry: Registry;
  readonly requests: Counter<'route' | 'method' | 'status'>;
  readonly latency: Histogram<'route'>;
  readonly errors: Counter<'code'>;
  /** Hooks the reader calls on hits, misses and fallbacks. */
  readonly readerEvents: ReaderEvents;
}

export function createMetrics(): ServeMetrics {
  const registry = new Registry();
  // Process CPU, memory and event-loop lag beside the service's own counters.
  collectDefaultMetrics({ register: registry, prefix: 'larder_' });
  const requests = new Counter({
    name: 'larder_http_requests_total',
    help: 'HTTP requests by route, method and status code',
    labelNames: ['route', 'method', 'status'] as const,
    registers: [registry],
  });
  const latency = new Histogram({
    name: 'larder_http_request_duration_seconds',
    help: 'HTTP request latency from arrival to response, by route',
    labelNames: ['route'] as const,
    // Feature reads are sub-millisecond on loopback; the low buckets carry the information.
    buckets: [0.00025, 0.0005, 0.001, 0.002, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 1],
    registers: [registry],
  });
  const hits = new Counter({
    name: 'larder_cache_hits_total',
    help: 'series read from the cache',
    registers: [registry],
  });
  const nearHits = new Counter({
    name: 'larder_near_cache_hits_total',
    help: 'series of larder_cache_hits_total answered from the in-process copies of the current version',
    registers: [registry],
  });
  const misses = new Counter({
    name: 'larder_cache_misses_total',
    help: 'series looked up in the cache and not found there',
    registers: [registry],
  });
  const fallbacks = new Counter({
    name: 'larder_fallbacks_total',
    help: 'series read from PostgreSQL instead of the cache, by reason (miss, unavailable, unpublished)',
    labelNames: ['reason'] as const,
    registers: [registry],
  });
  const errors = new Counter({
    name: 'larder_errors_total',
    help: 'requests answered with an error, by error code',
    labelNames: ['code'] as const,
    registers: [registry],
  });
  for (const reason of ['miss', 'unavailable', 'unpublished'] as const) fallbacks.inc({ reason }, 0);
  return {
    registry,
    requests,
    latency,
    errors,
    readerEvents: {
      hit: (n) => hits.inc(n),
      nearHit: (n) => nearHits.inc(n),
      miss: (n) => misses.inc(n),
      fallback: (reason: FallbackReason, n) => fallbacks.inc({ reason }, n),
    },
  };
}
