/**
 * The HTTP load generator of the serve benchmark, in a process of its own so that it does not
 * share an event loop with anything else: `npm run bench -- serve-http-load --url U --token T
 * --paths FILE [--rate 2000] [--duration 20] [--connections 20] [--pacing spread|burst]`. Sends
 * GETs of random paths from FILE (one a line) at a fixed overall rate with autocannon and prints
 * one JSON line with the latency percentiles of the 200 answers (from every response's own time,
 * not the ms-rounded histogram) and this process's CPU per request.
 *
 * autocannon limits a rate by a quota per connection per second: a connection sends its quota
 * back to back when its second starts, then waits for the next one. With every connection's
 * second starting at once (`--pacing burst`, one autocannon run) the first part of each second
 * has all connections waiting at the same time, so the figure is the queueing behind
 * `connections - 1` other requests rather than the latency at the rate. `--pacing spread` (the
 * default) runs one autocannon client of one connection per share of the rate, started
 * `1000 / connections` ms apart, so the shares' seconds are staggered and the requests arrive
 * spread over the second, as independent callers' requests do.
 */
import { readFileSync } from 'node:fs';
import { setTimeout as sleep } from 'node:timers/promises';
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
      pacing: { type: 'string', default: 'spread' },
    },
  });
  if (!o.url || !o.token || !o.paths) throw new Error('serve-http-load needs --url, --token and --paths');
  if (o.pacing !== 'spread' && o.pacing !== 'burst') throw new Error('--pacing is spread or burst');
  const paths = readFileSync(o.paths, 'utf8').split('\n').filter(Boolean);
  const rate = Number(o.rate);
  const connections = Math.max(1, Math.min(Number(o.connections), rate));
  const duration = Number(o.duration);
  const latencies: number[] = [];
  const run = (conns: number, overallRate: number) => {
    const instance = autocannon({
      url: o.url!,
      connections: conns,
      overallRate,
      duration,
      headers: { authorization: `Bearer ${o.token}` },
      requests: [
        { setupRequest: (req) => ({ ...req, path: paths[Math.floor(Math.random() * paths.length)]! }) },
      ],
    });
    instance.on('response', (_c: unknown, status: number, _b: number, ms: number) => {
      if (status === 200) latencies.push(ms);
    });
    return instance;
  };
  const cpu0 = process.cpuUsage();
  const runs: PromiseLike<{ requests: { total: number }; non2xx: number; errors: number }>[] = [];
  if (o.pacing === 'burst') {
    runs.push(run(connections, rate));
  } else {
    // Shares that add up to the rate exactly, one connection each, seconds staggered.
    for (let k = 0; k < connections; k++) {
      const share = Math.floor(rate / connections) + (k < rate % connections ? 1 : 0);
      runs.push(run(1, share));
      if (k < connections - 1) await sleep(1000 / connections);
    }
  }
  const results = await Promise.all(runs);
  const cpu = process.cpuUsage(cpu0);
  const sorted = Float64Array.from(latencies).sort();
  const sum = (f: (r: (typeof results)[number]) => number) => results.reduce((a, r) => a + f(r), 0);
  process.stdout.write(
    `${JSON.stringify({
      pacing: o.pacing,
      requests: sum((r) => r.requests.total),
      non2xx: sum((r) => r.non2xx),
      errors: sum((r) => r.errors),
      p50: percentile(sorted, 50),
      p99: percentile(sorted, 99),
      p999: percentile(sorted, 99.9),
      max: sorted.at(-1) ?? Number.NaN,
      // This process's own CPU a request: whether the load generator could be the bottleneck.
      cpuUsPerRequest:
        (cpu.user + cpu.system) /
        Math.max(
          1,
          sum((r) => r.requests.total),
        ),
    })}\n`,
  );
}
