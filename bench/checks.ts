/**
 * `npm run bench -- checks [--scale F] [--seeds 1,2,3] [--quality-only | --timing-only] [--reuse]`
 *
 * 1. Detection quality: the demo generator's default chain (4 stores x 60 items x 910 days) at
 *    each seed, loaded by the loader and checked; findings scored against faults.json per fault
 *    kind (recall, precision). Target: recall >= 0.95, precision >= 0.90.
 * 2. Speed: every check on the benchmark chain (10 stores x 3000 items x 1900 days = 57M sales
 *    rows at scale 1; the scale multiplies the items) against one ordered binary COPY read of the
 *    sales table consumed by Node, measured in the same run. Target: ratio <= 1.5.
 *
 * Needs DATABASE_URL (a PostgreSQL server). Data goes to bench-output/checks/, figures to
 * bench-output/checks.json. `--reuse` keeps a timing chain already loaded by an earlier run.
 */
import { mkdir, rm, writeFile } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import { runChecks } from '../src/checks/run-checks.js';
import { type Config, parseConfig } from '../src/config/config.js';
import { readCopyBinary } from '../src/db/binary-copy.js';
import type { Db } from '../src/db/database.js';
import { openDatabase } from '../src/db/open.js';
import { generateChain } from '../src/demo/generate-chain.js';
import { readFaultsFile } from '../src/demo/faults-file.js';
import { loadFiles } from '../src/load/load-files.js';
import { type KindScore, scoreDetection } from './checks-score.js';

const OUT = resolve('bench-output');
const FILE_KEYS = ['items', 'stores', 'sales', 'prices', 'calendar', 'events', 'benefit_days'] as const;

function flag(args: string[], name: string): string | undefined {
  const i = args.indexOf(name);
  return i >= 0 ? args[i + 1] : undefined;
}

async function freshSchema(url: string, schema: string): Promise<{ db: Db; config: Config }> {
  const config = parseConfig({ database: { url, schema, poolSize: 4 } }, 'bench');
  const admin = await openDatabase(config, { migrate: false, poolSize: 1 });
  await admin.exec(`DROP SCHEMA IF EXISTS "${schema}" CASCADE`);
  await admin.close();
  return { db: await openDatabase(config), config };
}

/** Generates a chain into `dir` and loads it into `db` the way the demo does. */
async function generateAndLoad(
  db: Db,
  config: Config,
  dir: string,
  gen: { stores: number; items: number; days: number; seed: number },
) {
  await rm(dir, { recursive: true, force: true });
  const g = await generateChain({ dir, ...gen });
  const faults = await readFaultsFile(g.faultsPath);
  const files: Partial<Record<(typeof FILE_KEYS)[number], string>> = {};
  for (const k of FILE_KEYS) {
    const f = faults.files[k];
    if (f) files[k] = join(dir, f);
  }
  const maxRejects = Object.values(faults.totals.rejects).reduce((a, b) => a + b, 0);
  await loadFiles(db, config, { files, layout: faults.generator.layout, mode: 'append', maxRejects });
  return { faults, salesLines: g.salesLines };
}

const pct = (x: number) => (Number.isNaN(x) ? '   -  ' : x.toFixed(3).padStart(6));

async function quality(url: string, seeds: number[]) {
  const perSeed: Array<{ seed: number; scores: KindScore[]; seconds: number }> = [];
  for (const seed of seeds) {
    const { db, config } = await freshSchema(url, 'bench_checks_quality');
    try {
      const { faults } = await generateAndLoad(db, config, join(OUT, 'checks', `seed-${seed}`), {
        stores: 4,
        items: 60,
        days: 910,
        seed,
      });
      const t0 = performance.now();
      const r = await runChecks(db, config, { cutoff: faults.generator.last_day });
      const seconds = (performance.now() - t0) / 1000;
      perSeed.push({
        seed,
        scores: scoreDetection(faults.faults, r.findings, faults.natural_low_volume_days),
        seconds,
      });
    } finally {
      await db.close();
    }
  }
  const lines = ['detection quality (demo chain 4 stores x 60 items x 910 days):'];
  lines.push(
    `  ${'fault kind'.padEnd(16)} seed  injected eligible detected  recall  findings matched  precision (explained)`,
  );
  for (const s of perSeed) {
    for (const k of s.scores) {
      lines.push(
        `  ${k.kind.padEnd(16)} ${String(s.seed).padStart(4)} ${String(k.injected).padStart(9)} ${String(k.eligible).padStart(8)} ` +
          `${String(k.detected).padStart(8)} ${pct(k.recall)} ${String(k.findings).padStart(9)} ${String(k.matched).padStart(7)}` +
          `     ${pct(k.precision)} (${pct(k.precisionExplained).trim()})`,
      );
    }
  }
  lines.push('  all seeds pooled:');
  const kinds = perSeed[0]?.scores.map((k) => k.kind) ?? [];
  const pooled = kinds.map((kind) => {
    const ks = perSeed.map((s) => s.scores.find((k) => k.kind === kind)!);
    const sum = (f: (k: KindScore) => number) => ks.reduce((a, k) => a + f(k), 0);
    const eligible = sum((k) => k.eligible);
    const findings = sum((k) => k.findings);
    return {
      kind,
      recall: eligible ? sum((k) => k.detected) / eligible : Number.NaN,
      precision: findings ? sum((k) => k.matched) / findings : Number.NaN,
      precisionExplained: findings ? sum((k) => k.matched + k.explained) / findings : Number.NaN,
    };
  });
  for (const p of pooled) {
    lines.push(
      `  ${p.kind.padEnd(16)} recall ${pct(p.recall)}  precision ${pct(p.precision)} (explained ${pct(p.precisionExplained).trim()})`,
    );
  }
  process.stdout.write(`${lines.join('\n')}\n\n`);
  return { perSeed, pooled };
}

/** One ordered binary COPY of the sales table decoded by Node: the read floor. */
async function readFloor(db: Db): Promise<{ seconds: number; rows: number }> {
  const t0 = performance.now();
  let rows = 0;
  let units = 0;
  const copy = db.copyTo('COPY (SELECT * FROM sales ORDER BY series_id, day) TO STDOUT (FORMAT binary)');
  for await (const b of readCopyBinary(copy, ['int4', 'date', 'int4'])) {
    const u = b.columns[2] as Int32Array;
    for (let i = 0; i < b.length; i++) units += u[i]!;
    rows += b.length;
  }
  if (units === -1) process.stdout.write(''); // keeps the decode from being optimised away
  return { seconds: (performance.now() - t0) / 1000, rows };
}

async function timing(url: string, scale: number, reuse: boolean) {
  const items = Math.max(4, Math.round(3000 * scale));
  // One schema per scale, so a small run never drops a full-scale chain loaded for --reuse.
  const schema =
    scale === 1 ? 'bench_checks_timing' : `bench_checks_timing_${String(scale).replace('.', '_')}`;
  let db: Db;
  let config: Config;
  const cfg = parseConfig({ database: { url, schema, poolSize: 4 } }, 'bench');
  const probe = reuse ? await openDatabase(cfg) : undefined;
  const existing = probe
    ? Number((await probe.query<{ n: number }>('SELECT count(*)::int8 AS n FROM series')).rows[0]?.n ?? 0)
    : 0;
  if (probe && existing === 10 * items) {
    db = probe;
    config = cfg;
    process.stdout.write(`timing: reusing schema ${schema} (${existing} series)\n`);
  } else {
    await probe?.close();
    ({ db, config } = await freshSchema(url, schema));
    process.stdout.write(`timing: generating and loading 10 stores x ${items} items x 1900 days ...\n`);
    await generateAndLoad(db, config, join(OUT, 'checks', 'timing'), {
      stores: 10,
      items,
      days: 1900,
      seed: 1,
    });
    await rm(join(OUT, 'checks', 'timing'), { recursive: true, force: true });
  }
  try {
    await db.exec('ANALYZE');
    const last = (await db.query<{ d: string }>('SELECT max(day)::text AS d FROM sales')).rows[0]!.d;
    await readFloor(db); // warm the page cache
    const before = await readFloor(db);
    // No stored copies: the passes read every row from `sales` and `prices`.
    await db.exec('DELETE FROM sales_blocks_state; DELETE FROM price_history_state');
    const t0 = performance.now();
    const r = await runChecks(db, config, { today: last });
    const checks = (performance.now() - t0) / 1000;
    const after = await readFloor(db);
    // The job runner's way: the same, storing the copies beside the passes.
    const tk = performance.now();
    await runChecks(db, config, { today: last, keepCopies: true });
    const keeping = (performance.now() - tk) / 1000;
    // Then again, the days now coming from the copies.
    const t1 = performance.now();
    const warmRun = await runChecks(db, config, { today: last });
    const warm = (performance.now() - t1) / 1000;
    const warmTimings = (
      await db.query<{ timings: Record<string, number> }>(
        'SELECT timings FROM check_runs WHERE run_id = $1',
        [warmRun.runId],
      )
    ).rows[0]!.timings;
    const floor = (before.seconds + after.seconds) / 2;
    const timings = (
      await db.query<{ timings: Record<string, number> }>(
        'SELECT timings FROM check_runs WHERE run_id = $1',
        [r.runId],
      )
    ).rows[0]!.timings;
    const lines = [
      `speed (10 stores x ${items} items x 1900 days, ${before.rows.toLocaleString('en')} sales rows):`,
      `  ordered binary COPY read, decoded in Node: ${before.seconds.toFixed(2)} s before, ${after.seconds.toFixed(2)} s after`,
      `  every check (${r.checks.length}):              ${checks.toFixed(2)} s`,
      `  ratio checks / read floor: ${(checks / floor).toFixed(2)}  (target <= 1.5)`,
      `  shared passes: sales ${((timings['pass:sales'] ?? 0) / 1000).toFixed(2)} s, prices ${((timings['pass:prices'] ?? 0) / 1000).toFixed(2)} s`,
      `  storing the copies as it reads (the job runner's check step): ${keeping.toFixed(2)} s (${(keeping / floor).toFixed(2)}x the read floor)`,
      `  again from the stored copies: ${warm.toFixed(2)} s (sales pass ${((warmTimings['pass:sales'] ?? 0) / 1000).toFixed(2)} s, prices ${((warmTimings['pass:prices'] ?? 0) / 1000).toFixed(2)} s; ${(warm / floor).toFixed(2)}x the read floor)`,
    ];
    process.stdout.write(`${lines.join('\n')}\n\n`);
    return {
      rows: before.rows,
      floorSeconds: floor,
      checkSeconds: checks,
      ratio: checks / floor,
      timings,
      warmSeconds: warm,
      warmTimings,
    };
  } finally {
    await db.close();
  }
}

export async function main(args: string[]): Promise<void> {
  const url = process.env.DATABASE_URL;
  if (!url) throw new Error('bench checks needs DATABASE_URL (a PostgreSQL server)');
  const scale = Number(flag(args, '--scale') ?? '1');
  if (!(scale > 0 && scale <= 1)) throw new Error('--scale must be in (0, 1]');
  const seeds = (flag(args, '--seeds') ?? '1,2,3').split(',').map(Number);
  if (seeds.some((s) => !Number.isInteger(s) || s < 0))
    throw new Error('--seeds: comma-separated whole numbers');
  await mkdir(OUT, { recursive: true });
  const result: Record<string, unknown> = { scale, seeds };
  if (!args.includes('--timing-only')) result.quality = await quality(url, seeds);
  if (!args.includes('--quality-only')) result.timing = await timing(url, scale, args.includes('--reuse'));
  await writeFile(join(OUT, 'checks.json'), `${JSON.stringify(result, null, 2)}\n`);
  process.stdout.write(`figures written to ${join(OUT, 'checks.json')}\n`);
}
