/**
 * `npm run bench -- run-pipeline [--scale small|full] [--stores N --items N --days N] [--hold N] [--keep]`
 *
 * The job runner end to end, each run a real `larder run` process against PostgreSQL (and Redis
 * when REDIS_URL is set), on a synthetic chain in its own schema `bench_pipeline` (full: 10
 * stores x 3,000 items x 1,900 days = 57M sales rows; small: 4 x 60 x 800). The last day of sales
 * (the last N days with --hold N) is held back, then:
 *   full-1   `larder run` (check, build, publish) of the standard set of examples/larder.config.ts
 *            with one worker (the runner's own claim loop);
 *   full-2   the same run forced, with a second worker process (`larder worker`) beside it;
 *   load     the held-back day loaded through the loader (one CSV file);
 *   incr     `larder run --cutoff latest`: the incremental refresh (load and incr repeat for each
 *            held-back day, alternating one worker and two: the runner and a `larder worker`).
 * Reported: wall time of every run, the check / build / publish step times from run_steps, and
 * the ratio of the median incremental run to the full run with as many workers (target <= 5%). Checks run as warnings so the gate never
 * stops the measurement. Figures go to bench-output/run-pipeline.json.
 */
import { spawn } from 'node:child_process';
import { mkdirSync, mkdtempSync, writeFileSync } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { parseArgs } from 'node:util';
import examples from '../examples/larder.config.js';
import { CHECK_NAMES } from '../src/checks/registry.js';
import { parseConfig } from '../src/config/config.js';
import { readEnv } from '../src/config/env.js';
import { formatDay, parseDay } from '../src/core/days.js';
import type { Db } from '../src/db/database.js';
import { openDatabase } from '../src/db/open.js';
import { loadFiles } from '../src/load/load-files.js';

const SCHEMA = 'bench_pipeline';
const START = '2019-01-05';
const SCALES = {
  small: { stores: 4, items: 60, days: 800 },
  full: { stores: 10, items: 3000, days: 1900 },
} as const;
const log = (line: string) => process.stdout.write(`${line}\n`);

interface Shape {
  readonly stores: number;
  readonly items: number;
  readonly days: number;
}

/** A synthetic chain, set-based: intermittent units (20-80% zero days), weekly prices, events. */
async function generate(db: Db, s: Shape): Promise<void> {
  const start = `DATE '${START}'`;
  await db.exec(`
    INSERT INTO stores SELECT 'store' || lpad(k::text, 2, '0'), 'region' || (k % 3) FROM generate_series(1, ${s.stores}) k;
    INSERT INTO items SELECT 'item' || lpad(k::text, 5, '0'), 'dept' || (k % 7), 'cat' || (k % 3) FROM generate_series(1, ${s.items}) k;
    INSERT INTO series (item_id, store_id)
      SELECT 'item' || lpad(i::text, 5, '0'), 'store' || lpad(k::text, 2, '0')
      FROM generate_series(1, ${s.stores}) k, generate_series(1, ${s.items}) i ORDER BY k, i;
    INSERT INTO calendar_days SELECT ${start} + d FROM generate_series(0, ${s.days + 60}) d;
    INSERT INTO events SELECT ${start} + d, 'Fair ' || (d % 5), CASE d % 2 WHEN 0 THEN 'holiday' ELSE 'sporting' END
      FROM generate_series(3, ${s.days + 60}, 23) d;
    INSERT INTO benefit_days SELECT 'region' || r, ${start} + d FROM generate_series(0, 2) r, generate_series(0, ${s.days + 60}) d
      WHERE extract(day FROM ${start} + d) IN (1 + r, 10 + r, 20 + r);
    INSERT INTO sales (series_id, day, units)
      SELECT r.series_id, ${start} + d,
        CASE WHEN abs(hashint8extended(r.series_id::int8 * 10000 + d, 1)) % 100 < 20 + r.series_id % 60 THEN 0
             ELSE 1 + (abs(hashint8extended(r.series_id::int8 * 10000 + d, 2)) % (1 + r.series_id % 9))::int4 END
      FROM series r, generate_series(0, ${s.days - 1}) d ORDER BY r.series_id, d;
    INSERT INTO prices (item_id, store_id, week_start, price)
      SELECT r.item_id, r.store_id, ${start} + 7 * w,
        round((1 + (r.series_id % 40) * 0.25) * (1 + (w / 52) * 0.03), 2)
      FROM series r, generate_series(0, ${Math.ceil((s.days + 60) / 7)}) w;
    ANALYZE;`);
}

/** Removes every key the runs published under the bench's prefix (the current versions stay otherwise). */
async function dropPublished(url: string): Promise<void> {
  const { Redis } = await import('ioredis');
  const redis = new Redis(url);
  try {
    let cursor = '0';
    do {
      const [next, keys] = await redis.scan(cursor, 'MATCH', `${SCHEMA}*`, 'COUNT', 2000);
      cursor = next;
      if (keys.length) await redis.unlink(...keys);
    } while (cursor !== '0');
  } finally {
    redis.disconnect();
  }
}

interface Timed {
  readonly seconds: number;
  readonly code: number | null;
  readonly output: string;
}

function larder(
  args: readonly string[],
  env: NodeJS.ProcessEnv,
): { done: Promise<Timed>; kill(sig: NodeJS.Signals): void } {
  const t0 = performance.now();
  const proc = spawn(process.execPath, ['bin/larder.js', ...args], {
    env,
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  let output = '';
  proc.stdout.on('data', (d: Buffer) => (output += d.toString()));
  proc.stderr.on('data', (d: Buffer) => (output += d.toString()));
  return {
    done: new Promise((res) =>
      proc.on('close', (code) => res({ seconds: (performance.now() - t0) / 1000, code, output })),
    ),
    kill: (sig) => proc.kill(sig),
  };
}

async function stepTimes(db: Db): Promise<Record<string, number>> {
  const r = await db.query<{ name: string; s: number }>(
    `SELECT name, extract(epoch FROM finished_at - started_at)::float8 AS s FROM run_steps
     WHERE run_id = (SELECT max(run_id) FROM runs) AND seq > 0 AND attempt = (SELECT attempt FROM runs ORDER BY run_id DESC LIMIT 1)
     ORDER BY seq`,
  );
  return Object.fromEntries(r.rows.map((x) => [x.name, Math.round(x.s * 100) / 100]));
}

export async function main(argv: string[]): Promise<void> {
  const { values } = parseArgs({
    args: argv,
    options: {
      scale: { type: 'string', default: 'small' },
      stores: { type: 'string' },
      items: { type: 'string' },
      days: { type: 'string' },
      keep: { type: 'boolean', default: false },
      hold: { type: 'string', default: '1' },
    },
  });
  const base = SCALES[values.scale as keyof typeof SCALES];
  if (!base) throw new Error(`--scale: small or full, got ${values.scale}`);
  const shape: Shape = {
    stores: Number(values.stores ?? base.stores),
    items: Number(values.items ?? base.items),
    days: Number(values.days ?? base.days),
  };
  const env = readEnv();
  if (!env.DATABASE_URL)
    throw new Error('the run-pipeline bench needs a PostgreSQL server: set DATABASE_URL');
  const standard = (examples.sets as { name: string }[]).find((s) => s.name === 'standard')!;
  const raw = {
    database: { url: env.DATABASE_URL, schema: SCHEMA, poolSize: 8 },
    redis: { prefix: SCHEMA },
    sets: [standard],
    checks: Object.fromEntries(CHECK_NAMES.map((c) => [c, { severity: 'warn' }])),
    pipeline: { workers: { concurrency: 1 }, steps: { publish: true }, incremental: true },
  };
  const config = parseConfig(raw, 'bench');
  const dir = mkdtempSync(join(tmpdir(), 'larder-bench-run-'));
  const configPath = join(dir, 'larder.config.json');
  writeFileSync(configPath, JSON.stringify(raw));
  const childEnv = { ...process.env, LARDER_SCHEMA: SCHEMA, LARDER_CONFIG: configPath };

  const admin = await openDatabase(config, { migrate: false, poolSize: 2 });
  await admin.exec(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);
  await admin.close();
  const db = await openDatabase(config, { poolSize: 2 });
  const figures: Record<string, unknown> = { shape, rows: shape.stores * shape.items * shape.days };
  try {
    const t0 = performance.now();
    await generate(db, shape);
    log(
      `generated ${shape.stores} x ${shape.items} x ${shape.days} = ${shape.stores * shape.items * shape.days} sales rows in ${((performance.now() - t0) / 1000).toFixed(1)} s`,
    );
    // Hold back the last days as the files nightly loads would deliver, one per day.
    const hold = Number(values.hold);
    if (!Number.isInteger(hold) || hold < 1 || hold >= shape.days)
      throw new Error(`--hold: 1 .. days - 1, got ${values.hold}`);
    const lastDay = parseDay(START)! + shape.days - 1;
    const cutoff = formatDay(lastDay - hold);
    const heldFiles: { file: string; rows: number }[] = [];
    for (let d = lastDay - hold + 1; d <= lastDay; d++) {
      const day = formatDay(d);
      const file = join(dir, `sales_${day}.csv`);
      let csv = 'item_id,store_id,day,units\n';
      const rows = await db.query<{ item_id: string; store_id: string; units: number }>(
        'SELECT r.item_id, r.store_id, s.units FROM sales s JOIN series r USING (series_id) WHERE s.day = $1 ORDER BY s.series_id',
        [day],
      );
      for (const r of rows.rows) csv += `${r.item_id},${r.store_id},${day},${r.units}\n`;
      writeFileSync(file, csv);
      heldFiles.push({ file, rows: rows.rows.length });
    }
    await db.query('DELETE FROM sales WHERE day > $1', [cutoff]);
    await db.exec('VACUUM ANALYZE sales');

    const full1 = await larder(['run', '--cutoff', cutoff, '--concurrency', '1'], childEnv).done;
    if (full1.code !== 0) throw new Error(`full run failed:\n${full1.output}`);
    figures.full1 = { seconds: full1.seconds, steps: await stepTimes(db) };
    log(
      `full-1  (1 worker)   ${full1.seconds.toFixed(2)} s  ${JSON.stringify((figures.full1 as { steps: unknown }).steps)}`,
    );

    const worker = larder(['worker', '--concurrency', '1'], childEnv);
    const full2 = await larder(['run', '--cutoff', cutoff, '--concurrency', '1', '--force'], childEnv).done;
    worker.kill('SIGTERM');
    const w = await worker.done;
    if (full2.code !== 0) throw new Error(`forced run failed:\n${full2.output}`);
    figures.full2 = {
      seconds: full2.seconds,
      steps: await stepTimes(db),
      worker: w.output.trim().split('\n').at(-1),
    };
    log(
      `full-2  (2 workers)  ${full2.seconds.toFixed(2)} s  ${JSON.stringify((figures.full2 as { steps: unknown }).steps)}`,
    );

    const incrementals: Array<Record<string, unknown> & { seconds: number; steps: Record<string, number> }> =
      [];
    // Incremental runs alternate one and two partitions at a time, each compared with the full
    // run of the same concurrency.
    for (const [h, held] of heldFiles.entries()) {
      const concurrency = h % 2 === 0 ? 1 : 2;
      const tl = performance.now();
      const loaded = await loadFiles(db, config, { files: { sales: held.file }, mode: 'append' });
      const loadSeconds = (performance.now() - tl) / 1000;
      if (!loaded.ok) throw new Error(`the held-back file ${held.file} did not load`);
      log(`load    one day      ${loadSeconds.toFixed(2)} s  (${held.rows} rows)`);

      // Two at a time as in full-2: the runner's own claim loop and one worker process beside it
      // (started before the run, as a deployment's workers are already running).
      const helper = concurrency === 2 ? larder(['worker', '--concurrency', '1'], childEnv) : null;
      if (helper) await new Promise((r) => setTimeout(r, 2000)); // its start-up is not the run's
      const incr = await larder(['run', '--cutoff', 'latest', '--concurrency', '1'], childEnv).done;
      if (helper) {
        helper.kill('SIGTERM');
        await helper.done;
      }
      if (incr.code !== 0) throw new Error(`incremental run failed:\n${incr.output}`);
      const steps = await stepTimes(db);
      const details = (
        await db.query<{ d: Record<string, unknown> }>(
          `SELECT details AS d FROM run_steps WHERE name = 'build' ORDER BY step_id DESC LIMIT 1`,
        )
      ).rows[0]?.d;
      const check = (
        await db.query<{ d: Record<string, unknown> }>(
          `SELECT details AS d FROM run_steps WHERE name = 'check' ORDER BY step_id DESC LIMIT 1`,
        )
      ).rows[0]?.d;
      const mode = details?.mode as string | undefined;
      const refresh = {
        fingerprint: details?.fingerprint,
        stockout: details?.stockout,
        salesFrom: details?.salesFrom,
        computedRows: details?.computedRows,
        timings: details?.timings,
      };
      incrementals.push({
        concurrency,
        seconds: incr.seconds,
        steps,
        mode,
        loadSeconds,
        refresh,
        checkScope: check?.scope,
      });
      log(
        `incr    (${mode}, ${concurrency} at a time)  ${incr.seconds.toFixed(2)} s  ${JSON.stringify(steps)}`,
      );
      log(`        refresh ${JSON.stringify(refresh)}`);
      if (check?.scope) log(`        check scope ${JSON.stringify(check.scope)}`);
    }
    type Incr = (typeof incrementals)[number];
    const medianOf = (xs: Incr[]) =>
      [...xs].sort((x, y) => x.seconds - y.seconds)[Math.floor((xs.length - 1) / 2)];
    const ratios: Record<string, unknown> = {};
    for (const [c, full] of [
      [1, figures.full1],
      [2, figures.full2],
    ] as const) {
      const m = medianOf(incrementals.filter((x) => x.concurrency === c));
      if (!m) continue;
      const f = full as { seconds: number; steps: Record<string, number> };
      const run = m.seconds / f.seconds;
      const build = (m.steps.build ?? Number.NaN) / (f.steps.build ?? Number.NaN);
      ratios[`workers${c}`] = { incrementalSeconds: m.seconds, fullSeconds: f.seconds, run, build };
      log(
        `ratio   ${c} worker(s): incremental run / full run ${(run * 100).toFixed(1)}% (${m.seconds.toFixed(2)} / ${f.seconds.toFixed(2)} s), build step ${(build * 100).toFixed(1)}% (target <= 5%; process start-up is in both runs)`,
      );
    }
    figures.incrementals = incrementals;
    figures.ratios = ratios;
    mkdirSync('bench-output', { recursive: true });
    await writeFile('bench-output/run-pipeline.json', `${JSON.stringify(figures, null, 2)}\n`);
  } finally {
    if (!values.keep) {
      await db.exec(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`).catch(() => {});
      if (env.REDIS_URL) await dropPublished(env.REDIS_URL).catch(() => {});
    }
    await db.close();
  }
}
