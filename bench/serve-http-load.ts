/**
 * The HTTP load generator of the serve benchmark, in a process of its own so that it does not
 * share an event loop with anything else: `npm run bench -- serve-http-load --url U --token T
 * --paths FILE [--rate 2000] [--duration 20] [--connections 20]`. Sends GETs of random paths
 * from FILE (one a line) at a fixed overall rate with autocannon and prints one JSON line with
 * the latency percentiles of the 200 answers (from every response's own time, not the ms-rounded
 * histogram).
 */
import { readFileSync } from 'node:fs';
import { parseArgs } from 'node:util';
import autocannon from 'autocannon';

function percentile(sorted: Float64Array, p: number): number {
  return sorted[Math.min(sorted.length - 1, Math.floor((p / 100) * sorted.length))] ?? Number.NaN;
}

export async function main(argv: string[]): Promise<void> {
  const { values: o } = parseArgs({
    args: argv,
    options: {
      url: { type: 'string' },
      token: { type: 'string' },
      paths: { type: 'string' },
      rate: { type: 'string', default: '2000' },
      duration: { type: 'string', default: '20' },
      connections: { type: 'string', default: '20' },
    },
  });
  if (!o.url || !o.token || !o.paths) throw new Error('serve-http-load needs --url, --token and --paths');
  const paths = readFileSync(o.paths, 'utf8').split('\n').filter(Boolean);
  const latencies: number[] = [];
  const instance = autocannon({
    url: o.url,
    connections: Number(o.connections),
    overallRate: Number(o.rate),
    duration: Number(o.duration),
    headers: { authorization: `Bearer ${o.token}` },
    requests: [
      { setupRequest: (req) => ({ ...req, path: paths[Math.floor(Math.random() * paths.length)]! }) },
    ],
  });
  instance.on('response', (_c: unknown, status: number, _b: number, ms: number) => {
    if (status === 200) latencies.push(ms);
  });
  const r = await instance;
  const sorted = Float64Array.from(latencies).sort();
  process.stdout.write(
    `${JSON.stringify({
      requests: r.requests.total,
      non2xx: r.non2xx,
      errors: r.errors,
      p50: percentile(sorted, 50),
      p99: percentile(sorted, 99),
      p999: percentile(sorted, 99.9),
      max: sorted.at(-1) ?? Number.NaN,
    })}\n`,
  );
}
