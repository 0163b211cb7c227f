// The part of autocannon's API the benchmarks use (the package ships no types).
declare module 'autocannon' {
  import type { EventEmitter } from 'node:events';

  interface RawRequest {
    method?: string;
    path?: string;
    headers?: Record<string, string>;
    body?: string;
  }
  interface Options {
    url: string;
    connections?: number;
    overallRate?: number;
    duration?: number;
    headers?: Record<string, string>;
    requests?: { setupRequest?: (req: RawRequest) => RawRequest }[];
  }
  interface Result {
    requests: { total: number; average: number };
    latency: { p50: number; p99: number };
    non2xx: number;
    errors: number;
  }
  type Instance = EventEmitter & PromiseLike<Result>;
  function autocannon(opts: Options): Instance;
  export default autocannon;
}
