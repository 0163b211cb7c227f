/**
 * `npm run bench -- load [--scale small|full] [--keep] [--clean]`: `larder load` of a long-layout
 * sales file against psql's `\copy` of the same file in the same run. The file is kept under
 * bench-output/load/ for the next run (`--clean` removes it); `--keep` keeps the loaded schemas.
 *
 * - full: 10 stores x 3,000 items x 1,900 days = 57M rows (about 2 GB); small: 10 x 30 x 1,000
 *   = 300k rows. The file is written once by a deterministic writer here and reused.
 * - Reference: `\copy` into a table with the file's own columns (text ids) and the same key as
 *   `sales` (primary key item_id, store_id, day); also into the same table without a key, the
 *   floor of COPY itself. Each runs as a child process under /usr/bin/time for its peak RSS.
 * - Target (issue 2): larder rows/s >= 0.8 x the keyed `\copy`, peak RSS < 300 MB.
 * Needs DATABASE_URL (a server: psql cannot reach the embedded database) and psql on the PATH.
 * Figures go to bench-output/load.json.
 */
import { execFile, spawn } from 'node:child_process';
import { createReadStream, createWriteStream, existsSync } from 'node:fs';
import { mkdir, rm, stat, writeFile } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { promisify } from 'node:util';
import pg from 'pg';

const SCALES = {
  small: { stores: 10, items: 30, days: 1000 },
  full: { stores: 10, items: 3000, days: 1900 },
} as const;
type Scale = keyof typeof SCALES;

const OUT = resolve('bench-output');
const BIN = fileURLToPath(new URL('../bin/larder.js', import.meta.url));
const SCHEMA = 'bench_load';
const REF_SCHEMA = 'bench_load_ref';

/** Writes the sales file: every series sorted by day, units from a small integer hash. */
async function writeSales(path: string, s: (typeof SCALES)[Scale]): Promise<number> {
  const out = createWriteStream(path, { highWaterMark: 1 << 20 });
  const t0 = Date.UTC(2019, 0, 1);
  const days = Array.from({ length: s.days }, (_, d) =>
    new Date(t0 + d * 86_400_000).toISOString().slice(0, 10),
  );
  let buf = 'item_id,store_id,day,units\n';
  let rows = 0;
  for (let st = 0; st < s.stores; st++) {
    const store = `store-${String(st + 1).padStart(2, '0')}`;
    for (let it = 0; it < s.items; it++) {
      const item = `item-${String(it + 1).padStart(5, '0')}`;
      for (let d = 0; d < s.days; d++) {
        const h = (Math.imul(it + 1, 2654435761) ^ Math.imul(d + 7, 40503) ^ st) >>> 0;
        buf += `${item},${store},${days[d]},${h % 17 < 6 ? 0 : h % 9}\n`;
        rows++;
      }
      if (buf.length > 1 << 20) {
        if (!out.write(buf)) await new Promise<void>((r) => out.once('drain', () => r()));
        buf = '';
      }
    }
  }
  await new Promise<void>((res, rej) => out.end(buf, () => res()).on('error', rej));
  return rows;
}

interface Run {
  readonly seconds: number;
  readonly maxRssMb: number | null;
  readonly stdout: string;
}

/** Runs a child under /usr/bin/time (when present) for its peak RSS; wall time measured here. */
async function timed(cmd: string, args: string[], env: NodeJS.ProcessEnv): Promise<Run> {
  const useTime = existsSync('/usr/bin/time');
  const [file, argv] = useTime ? ['/usr/bin/time', ['-f', 'MAXRSS_KB=%M', cmd, ...args]] : [cmd, args];
  const t0 = performance.now();
  const child = spawn(file, argv as string[], { env, stdio: ['ignore', 'pipe', 'pipe'] });
  let stdout = '';
  let stderr = '';
  child.stdout.on('data', (d) => (stdout += d));
  child.stderr.on('data', (d) => (stderr += d));
  const code = await new Promise<number>((r) => child.on('close', (c) => r(c ?? 1)));
  const seconds = (performance.now() - t0) / 1000;
  if (code !== 0) throw new Error(`${cmd} ${args.join(' ')} exited ${code}:\n${stdout}\n${stderr}`);
  const m = /MAXRSS_KB=(\d+)/.exec(stderr);
  return { seconds, maxRssMb: m ? Number(m[1]) / 1024 : null, stdout };
}

export async function main(args: string[]): Promise<void> {
  const at = args.indexOf('--scale');
  const scale = (at >= 0 ? args[at + 1] : 'small') as Scale;
  if (!(scale in SCALES)) throw new Error('--scale must be small or full');
  const url = process.env.DATABASE_URL;
  if (!url) throw new Error('bench load needs DATABASE_URL (a PostgreSQL server; psql is the reference)');
  await promisify(execFile)('psql', ['--version']).catch(() => {
    throw new Error('bench load needs psql on the PATH (the reference is psql \\copy)');
  });

  const dir = join(OUT, 'load');
  await mkdir(dir, { recursive: true });
  const file = join(dir, `sales-${scale}.csv`);
  const s = SCALES[scale];
  const rows = s.stores * s.items * s.days;
  if (!existsSync(file) || (await stat(file)).size < rows * 20) {
    process.stdout.write(`writing ${rows.toLocaleString('en')} rows to ${file} ...\n`);
    await writeSales(file, s);
  }
  const bytes = (await stat(file)).size;
  // Both sides read the file from the page cache.
  await new Promise<void>((r) =>
    createReadStream(file)
      .on('data', () => {})
      .on('close', () => r()),
  );

  const admin = new pg.Client({ connectionString: url });
  await admin.connect();
  const refTable = (name: string, key: boolean) =>
    `CREATE TABLE ${REF_SCHEMA}.${name} (item_id text NOT NULL, store_id text NOT NULL, day date NOT NULL, units int4 NOT NULL${key ? ', PRIMARY KEY (item_id, store_id, day)' : ''})`;
  await admin.query(`DROP SCHEMA IF EXISTS ${REF_SCHEMA} CASCADE; CREATE SCHEMA ${REF_SCHEMA};
    ${refTable('keyed', true)}; ${refTable('unkeyed', false)}`);
  await admin.query(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);

  const env = { ...process.env, DATABASE_URL: url, LARDER_SCHEMA: SCHEMA };
  const copy = (table: string) =>
    timed(
      'psql',
      [
        url,
        '-v',
        'ON_ERROR_STOP=1',
        '-c',
        `\\copy ${REF_SCHEMA}.${table} FROM '${file}' (FORMAT csv, HEADER true)`,
      ],
      env,
    );
  process.stdout.write(
    `load bench (${scale}): ${rows.toLocaleString('en')} rows, ${(bytes / 1e6).toFixed(0)} MB\n`,
  );
  const keyed = await copy('keyed');
  const unkeyed = await copy('unkeyed');
  // Migrations outside the timing; its peak RSS is the CLI's own floor (every command module loaded).
  const init = await timed(process.execPath, [BIN, 'init'], env);
  const larder = await timed(process.execPath, [BIN, 'load', '--sales', file], env);

  const count = async (q: string) => Number((await admin.query<{ n: string }>(q)).rows[0]!.n);
  const stored = await count(`SELECT count(*) AS n FROM ${SCHEMA}.sales`);
  const refRows = await count(`SELECT count(*) AS n FROM ${REF_SCHEMA}.keyed`);
  if (stored !== rows || refRows !== rows)
    throw new Error(`row counts differ: larder ${stored}, \\copy ${refRows}, file ${rows}`);
  const loaderSeconds = Number(/ in ([\d.]+) s /.exec(larder.stdout)?.[1] ?? Number.NaN);
  if (!args.includes('--keep'))
    await admin.query(`DROP SCHEMA ${SCHEMA} CASCADE; DROP SCHEMA ${REF_SCHEMA} CASCADE`);
  await admin.end();

  const rate = (r: Run) => rows / r.seconds;
  const figures = {
    scale,
    rows,
    bytes,
    psqlCopyKeyed: { seconds: keyed.seconds, rowsPerSecond: rate(keyed), maxRssMb: keyed.maxRssMb },
    psqlCopyUnkeyed: { seconds: unkeyed.seconds, rowsPerSecond: rate(unkeyed), maxRssMb: unkeyed.maxRssMb },
    larderLoad: {
      seconds: larder.seconds,
      loaderSeconds,
      rowsPerSecond: rate(larder),
      maxRssMb: larder.maxRssMb,
      cliFloorRssMb: init.maxRssMb,
    },
    ratioVsKeyed: rate(larder) / rate(keyed),
    ratioVsUnkeyed: rate(larder) / rate(unkeyed),
    // The batch alone, without the CLI's start-up (which dominates at small scale).
    batchRatioVsKeyed: rows / loaderSeconds / rate(keyed),
    target: { ratioVsKeyed: 0.8, maxRssMb: 300 },
    measuredAt: new Date().toISOString(),
  };
  const line = (name: string, r: Run) =>
    `  ${name.padEnd(26)} ${r.seconds.toFixed(2).padStart(8)} s  ${Math.round(rate(r)).toLocaleString('en').padStart(11)} rows/s  peak RSS ${r.maxRssMb?.toFixed(0) ?? '?'} MB`;
  process.stdout.write(
    [
      line('psql \\copy (keyed table)', keyed),
      line('psql \\copy (no key)', unkeyed),
      line('larder load (process)', larder),
      `  larder's own timing of the batch: ${loaderSeconds.toFixed(2)} s (the rest is start-up and connecting)`,
      `  ratio larder / \\copy keyed:  ${figures.ratioVsKeyed.toFixed(2)}  (target >= 0.8)`,
      `  ratio larder / \\copy no key: ${figures.ratioVsUnkeyed.toFixed(2)}`,
      `  ratio of the batch alone / \\copy keyed: ${figures.batchRatioVsKeyed.toFixed(2)}`,
      `  larder peak RSS ${larder.maxRssMb?.toFixed(0) ?? '?'} MB (target < 300 MB); \`larder init\` alone peaks at ${init.maxRssMb?.toFixed(0) ?? '?'} MB`,
      '',
    ].join('\n'),
  );
  await writeFile(join(OUT, 'load.json'), `${JSON.stringify(figures, null, 2)}\n`);
  if (args.includes('--clean')) await rm(dir, { recursive: true, force: true });
}
