/**
 * `npm run bench -- export [options]`: snapshot export to Parquet against DuckDB writing the same
 * rows, and `larder score` over the 12 levels.
 *
 *   --rows N          synthetic snapshot rows (default 1,000,000), --features F (default 40)
 *   --layout build|sorted  synthetic table stored as the build writes it (per store, series ids
 *                     item-major: not in row order, so the export sorts; default) or in row order
 *   --set S --cutoff C  export a snapshot built by `larder build` instead (no synthetic table)
 *   --score-series N  bottom series of the synthetic scoring chain (default 3,000; 30,000 = full)
 *   --score-days D    days of sales history before the cutoff (default 200)
 *   --skip-score, --skip-export
 *   --schema NAME     where the synthetic data lives (default bench_export; its tables are refilled)
 *
 * Each measured run is a child process, so its peak RSS is its own. Targets: export rate >= 0.5x
 * DuckDB's, export peak RSS < 1 GB; score at 30k series < 30 s. Beside the export it measures the
 * read floor (the same rows read out of PostgreSQL and dropped), which bounds what any export
 * reading the snapshot table can reach against DuckDB writing from its own memory.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { parseArgs } from 'node:util';
import { DuckDBDateValue, DuckDBInstance } from '@duckdb/node-api';
import { type Config, loadConfig, parseConfig } from '../src/config/config.js';
import { formatDay } from '../src/core/days.js';
import { openDatabase } from '../src/db/open.js';
import { materializeScales } from '../src/eval/materialize-scales.js';
import { scoreForecasts } from '../src/eval/score-forecasts.js';
import { exportLayout } from '../src/export/export-layout.js';
import { exportSnapshot, loadSeriesIds } from '../src/export/export-snapshot.js';
import { pinSnapshot } from '../src/export/snapshot-entry.js';
import { OutOfOrderError, readSnapshot } from '../src/export/snapshot-reader.js';

const OPTIONS = {
  rows: { type: 'string', default: '1000000' },
  features: { type: 'string', default: '40' },
  layout: { type: 'string', default: 'build' },
  set: { type: 'string' },
  cutoff: { type: 'string' },
  schema: { type: 'string', default: 'bench_export' },
  'score-series': { type: 'string', default: '3000' },
  'score-days': { type: 'string', default: '200' },
  'skip-score': { type: 'boolean', default: false },
  'skip-export': { type: 'boolean', default: false },
  child: { type: 'string' },
  out: { type: 'string' },
  forecasts: { type: 'string' },
} as const;

type Opts = ReturnType<typeof parseArgs<{ options: typeof OPTIONS }>>['values'];

const SELF = fileURLToPath(import.meta.url);
const SYNTH_SET = 'bench_synthetic';
const SYNTH_CUTOFF = '2024-06-30';

async function benchConfig(schema: string): Promise<Config> {
  const base = await loadConfig();
  if (!base.database.url) throw new Error('the export bench needs a PostgreSQL server: set DATABASE_URL');
  return parseConfig({ database: { url: base.database.url, schema, poolSize: 3 } }, 'bench');
}

function child(args: string[]): Record<string, number> {
  const r = spawnSync(process.execPath, ['--import', 'tsx', SELF, ...args], {
    encoding: 'utf8',
    stdio: ['ignore', 'pipe', 'inherit'],
  });
  if (r.status !== 0) throw new Error(`child ${args.join(' ')} failed (${r.status})`);
  const last = r.stdout.trim().split('\n').at(-1)!;
  return JSON.parse(last) as Record<string, number>;
}

const maxRssMb = () => process.resourceUsage().maxRSS / 1024;

/** A synthetic snapshot in the contract's layout: `rows` rows, `features` float8 columns with NULLs. */
async function makeSyntheticSnapshot(
  config: Config,
  rows: number,
  features: number,
  layout: string,
): Promise<void> {
  const db = await openDatabase(config, { poolSize: 1 });
  try {
    const days = 400;
    const series = Math.ceil(rows / days);
    const cols = Array.from({ length: features }, (_, f) => `f${String(f).padStart(2, '0')}`);
    await db.exec(`DROP TABLE IF EXISTS snap_bench; TRUNCATE items, stores, series CASCADE;
      DELETE FROM snapshots WHERE set_name = '${SYNTH_SET}';
      INSERT INTO stores SELECT 'store_' || s, 'region_' || (s % 3) FROM generate_series(1, 10) s;
      INSERT INTO items SELECT 'item_' || lpad(i::text, 5, '0'), 'dept_' || (i % 7), 'cat_' || (i % 3)
        FROM generate_series(1, ${Math.ceil(series / 10)}) i;
      INSERT INTO series (item_id, store_id) SELECT item_id, store_id FROM items, stores ORDER BY item_id, store_id LIMIT ${series};
      CREATE TABLE snap_bench (series_id int4 NOT NULL, day date NOT NULL, origin date, is_predict bool NOT NULL, label int4,
        ${cols.map((c) => `${c} float8`).join(', ')})`);
    // Values in the range real features take (counts, means of counts, ratios), one in 9 NULL.
    const exprs = cols.map(
      (c, f) =>
        `CASE WHEN (s.series_id + d + ${f}) % 9 = 0 THEN NULL ELSE round((abs(hashint4(s.series_id * 1000 + d * 41 + ${f})) % 100000) / ${f % 3 === 0 ? 1e4 : 1e2}, ${f % 3 === 0 ? 4 : 2}) END AS ${c}`,
    );
    await db.exec(`INSERT INTO snap_bench
      SELECT s.series_id, DATE '${SYNTH_CUTOFF}' - ${days - 29} + d, NULL, d >= ${days - 28},
        CASE WHEN d >= ${days - 28} THEN NULL ELSE abs(hashint4(s.series_id + d)) % 20 END, ${exprs.join(', ')}
      FROM series s CROSS JOIN generate_series(1, ${days}) d
      ORDER BY ${layout === 'sorted' ? 's.series_id, d' : 's.store_id, s.series_id, d'}`);
    const n = (await db.query<{ n: number }>('SELECT count(*)::int AS n FROM snap_bench')).rows[0]!.n;
    await db.query(
      `INSERT INTO snapshots (set_name, cutoff, definition_hash, data_fingerprint, table_name, mode, horizon, columns,
         row_count, train_rows, predict_rows, timings, train_from, fingerprint_parts, codes, definition)
       VALUES ($1, $2, 'bench', 'bench', 'snap_bench', 'shift', 28, $3, $4, $5, $6, '{}', $2::date - 371, '{}', '{}', '{}')`,
      [
        SYNTH_SET,
        SYNTH_CUTOFF,
        JSON.stringify(
          cols.map((name) => ({ name, type: 'float8', family: 'windows', description: 'synthetic' })),
        ),
        n,
        n - series * 28,
        series * 28,
      ],
    );
  } finally {
    await db.close();
  }
}

async function childLarder(o: Opts): Promise<void> {
  const config = await benchConfig(o.schema);
  const db = await openDatabase(config, { migrate: false });
  const t0 = performance.now();
  const r = await exportSnapshot(db, config, {
    set: o.set!,
    cutoff: o.cutoff!,
    out: o.out!,
    format: 'parquet',
  });
  const seconds = (performance.now() - t0) / 1000;
  await db.close();
  process.stdout.write(
    `${JSON.stringify({ seconds, rows: r.rowCount, bytes: statSync(r.path).size, maxRssMb: maxRssMb() })}\n`,
  );
}

/** CPU seconds a process has used so far, from /proc (user + system); null where it cannot be read. */
function procCpuSeconds(pid: number): number | null {
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    // Fields 14 and 15 of proc(5) (utime, stime) are the 12th and 13th after the command name.
    return (Number(f[11]) + Number(f[12])) / 100;
  } catch {
    return null;
  }
}

/**
 * The read floor: the same rows read out of PostgreSQL with one binary COPY in storage order (the
 * export's physical read, without the sort it falls back to when the table is not in row order)
 * and thrown away, undecoded. No export reading through one connection can be faster; where the
 * server runs on this machine its backend's CPU seconds are read from /proc too, which bound an
 * export that would split the read over several connections.
 */
async function childFloor(o: Opts): Promise<void> {
  const config = await benchConfig(o.schema);
  const db = await openDatabase(config, { migrate: false });
  const t0 = performance.now();
  const cpu0 = process.cpuUsage();
  const r = await db.transaction(async (tx) => {
    const info = await pinSnapshot(tx, o.set!, o.cutoff!);
    const layout = exportLayout(info);
    const pid = (await tx.query<{ pid: number }>('SELECT pg_backend_pid() AS pid')).rows[0]!.pid;
    await tx.exec('SET LOCAL synchronize_seqscans = off; SET LOCAL max_parallel_workers_per_gather = 0');
    const before = procCpuSeconds(pid);
    let bytes = 0;
    for await (const c of tx.copyTo(`COPY (${layout.select}) TO STDOUT (FORMAT binary)`))
      bytes += c.byteLength;
    const after = procCpuSeconds(pid);
    return { bytes, serverCpu: before === null || after === null ? -1 : after - before };
  });
  const seconds = (performance.now() - t0) / 1000;
  const cpu = process.cpuUsage(cpu0);
  await db.close();
  process.stdout.write(
    `${JSON.stringify({ seconds, bytes: r.bytes, serverCpu: r.serverCpu, clientCpu: (cpu.user + cpu.system) / 1e6 })}\n`,
  );
}

/** The reference: the same rows, streamed the same way, appended into DuckDB, then COPY TO Parquet. */
async function childDuck(o: Opts): Promise<void> {
  const config = await benchConfig(o.schema);
  const db = await openDatabase(config, { migrate: false });
  const duck = await (await DuckDBInstance.create(':memory:', { threads: '2' })).connect();
  const t0 = performance.now();
  let rows = 0;
  for (const mode of ['physical', 'sorted'] as const) {
    try {
      rows = await db.transaction(async (tx) => {
        const info = await pinSnapshot(tx, o.set!, o.cutoff!);
        const layout = exportLayout(info);
        const ids = await loadSeriesIds(tx);
        const ddl = layout.columns.map((c) => {
          const t = { text: 'VARCHAR', date: 'DATE', bool: 'BOOLEAN', int4: 'INTEGER', float8: 'DOUBLE' }[
            c.type
          ];
          return `"${c.name}" ${t}`;
        });
        await duck.run(`CREATE OR REPLACE TABLE x (${ddl.join(', ')})`);
        const ap = await duck.createAppender('x');
        const types = layout.copyTypes;
        let n = 0;
        for await (const b of readSnapshot(db, tx, layout, mode)) {
          const sid = b.columns[0] as Int32Array;
          for (let r = 0; r < b.length; r++) {
            ap.appendVarchar(ids.itemText.get(sid[r]!)!);
            ap.appendVarchar(ids.storeText.get(sid[r]!)!);
            for (let c = 1; c < types.length; c++) {
              if (b.nulls[c]![r]) ap.appendNull();
              else if (types[c] === 'date')
                ap.appendDate(new DuckDBDateValue((b.columns[c] as Int32Array)[r]!));
              else if (types[c] === 'bool') ap.appendBoolean((b.columns[c] as Uint8Array)[r] === 1);
              else if (types[c] === 'int4') ap.appendInteger((b.columns[c] as Int32Array)[r]!);
              else ap.appendDouble((b.columns[c] as Float64Array)[r]!);
            }
            ap.endRow();
          }
          n += b.length;
        }
        ap.closeSync();
        return n;
      });
      break;
    } catch (err) {
      if (!(err instanceof OutOfOrderError)) throw err;
    }
  }
  const streamed = (performance.now() - t0) / 1000;
  const t1 = performance.now();
  await duck.run(`COPY x TO '${o.out}' (FORMAT parquet)`);
  const copy = (performance.now() - t1) / 1000;
  duck.closeSync();
  await db.close();
  process.stdout.write(
    `${JSON.stringify({ streamed, copy, seconds: streamed + copy, rows, bytes: statSync(o.out!).size, maxRssMb: maxRssMb() })}\n`,
  );
}

/** A synthetic chain for scoring: `series` bottom series, `days` days of sales, 28 after the cutoff. */
async function makeScoringChain(config: Config, series: number, days: number): Promise<string> {
  const db = await openDatabase(config, { poolSize: 1 });
  try {
    const cutoff = SYNTH_CUTOFF;
    await db.exec(`TRUNCATE items, stores, series, sales, prices, eval_scales, eval_weights, eval_materializations, eval_scores;
      INSERT INTO stores SELECT 'store_' || s, 'region_' || (s % 3) FROM generate_series(1, 10) s;
      INSERT INTO items SELECT 'item_' || lpad(i::text, 5, '0'), 'dept_' || (i % 7), 'cat_' || (i % 7 % 3)
        FROM generate_series(1, ${Math.ceil(series / 10)}) i;
      INSERT INTO series (item_id, store_id) SELECT item_id, store_id FROM items, stores ORDER BY item_id, store_id LIMIT ${series};
      INSERT INTO sales SELECT s.series_id, DATE '${cutoff}' - ${days - 1} + d,
          greatest(0, (s.series_id % 5) + (d % 7 = 5)::int * 2 + abs(hashint4(s.series_id * 7919 + d)) % 4 - 2)
        FROM series s CROSS JOIN generate_series(0, ${days + 27}) d
        WHERE d >= s.series_id % 30;
      INSERT INTO prices SELECT s.item_id, s.store_id, w, 1 + (abs(hashint4(s.series_id)) % 900) / 100.0
        FROM series s CROSS JOIN generate_series(DATE '${cutoff}' - ${days + 7}, DATE '${cutoff}' + 35, interval '1 day') w
        WHERE extract(isodow FROM w) = 6;
      ANALYZE sales; ANALYZE prices`);
    return cutoff;
  } finally {
    await db.close();
  }
}

async function childScore(o: Opts): Promise<void> {
  const config = await benchConfig(o.schema);
  const db = await openDatabase(config, { migrate: false });
  const t0 = performance.now();
  const r = await scoreForecasts(db, config, {
    cutoff: o.cutoff!,
    forecastsPath: o.forecasts!,
    record: false,
  });
  const seconds = (performance.now() - t0) / 1000;
  await db.close();
  const series = r.series.length;
  process.stdout.write(
    `${JSON.stringify({ seconds, series, wrmsse: r.sources[0]!.wrmsse, maxRssMb: maxRssMb() })}\n`,
  );
}

export async function main(args: string[]): Promise<void> {
  const { values: o } = parseArgs({ args, options: OPTIONS, strict: true });
  if (o.child === 'larder') return childLarder(o);
  if (o.child === 'duckdb') return childDuck(o);
  if (o.child === 'floor') return childFloor(o);
  if (o.child === 'score') return childScore(o);
  const dir = mkdtempSync(join(tmpdir(), 'larder-bench-'));
  const line = (s: string) => process.stdout.write(`${s}\n`);
  try {
    if (!o['skip-export']) {
      let set = o.set;
      let cutoff = o.cutoff;
      let schema = o.schema;
      if (!set) {
        const config = await benchConfig(schema);
        const t0 = performance.now();
        if (o.layout !== 'build' && o.layout !== 'sorted') throw new Error('--layout is build or sorted');
        await makeSyntheticSnapshot(config, Number(o.rows), Number(o.features), o.layout);
        const stored = o.layout === 'build' ? 'per store, as the build writes it' : 'in row order';
        line(
          `synthetic snapshot: ${o.rows} rows x ${o.features} features stored ${stored}, in ${((performance.now() - t0) / 1000).toFixed(1)} s`,
        );
        set = SYNTH_SET;
        cutoff = SYNTH_CUTOFF;
      } else {
        if (!cutoff) throw new Error('--set needs --cutoff');
        schema = (await loadConfig()).database.schema;
      }
      const common = ['--set', set, '--cutoff', cutoff!, '--schema', schema];
      const mine = child(['--child', 'larder', ...common, '--out', join(dir, 'larder.parquet')]);
      const floor = child(['--child', 'floor', ...common]);
      const ref = child(['--child', 'duckdb', ...common, '--out', join(dir, 'duckdb.parquet')]);
      const rate = (r: Record<string, number>, s = r.seconds!) => r.rows! / s;
      line(`export of ${mine.rows} rows to Parquet`);
      line(
        `  larder export      ${mine.seconds!.toFixed(2)} s  ${Math.round(rate(mine))} rows/s  peak RSS ${Math.round(mine.maxRssMb!)} MB  file ${(mine.bytes! / 1e6).toFixed(1)} MB`,
      );
      line(
        `  duckdb end to end  ${ref.seconds!.toFixed(2)} s  ${Math.round(rate(ref))} rows/s  peak RSS ${Math.round(ref.maxRssMb!)} MB  file ${(ref.bytes! / 1e6).toFixed(1)} MB`,
      );
      line(
        `    (stream + appender ${ref.streamed!.toFixed(2)} s, COPY TO parquet ${ref.copy!.toFixed(2)} s = ${Math.round(rate(ref, ref.copy!))} rows/s)`,
      );
      const server = floor.serverCpu! >= 0 ? `, server CPU ${floor.serverCpu!.toFixed(1)} s` : '';
      line(
        `  read floor         ${floor.seconds!.toFixed(2)} s  (COPY out of PostgreSQL, bytes dropped: ${(floor.bytes! / 1e9).toFixed(2)} GB${server}, client CPU ${floor.clientCpu!.toFixed(1)} s)`,
      );
      line(
        `  larder export / read floor: ${(mine.seconds! / floor.seconds!).toFixed(2)}x   best reachable vs duckdb COPY alone (export at the floor): ${(ref.copy! / floor.seconds!).toFixed(2)}x`,
      );
      line(
        `  ratio vs duckdb end to end: ${(rate(mine) / rate(ref)).toFixed(2)}x   vs duckdb COPY alone: ${(rate(mine) / rate(ref, ref.copy!)).toFixed(2)}x   (target >= 0.5x, RSS < 1024 MB)`,
      );
    }
    if (!o['skip-score']) {
      const schema = `${o.schema}_score`;
      const config = await benchConfig(schema);
      const series = Number(o['score-series']);
      const days = Number(o['score-days']);
      const t0 = performance.now();
      const cutoff = await makeScoringChain(config, series, days);
      line(
        `\nscoring chain: ${series} series x ${days + 28} days in ${((performance.now() - t0) / 1000).toFixed(1)} s`,
      );
      const db = await openDatabase(config);
      const t1 = performance.now();
      await materializeScales(db, config, { cutoff });
      line(`  larder scales (materialize 12 levels)  ${((performance.now() - t1) / 1000).toFixed(2)} s`);
      // A forecasts file: every series, 28 days, a noisy level.
      const ids = await db.query<{ item_id: string; store_id: string }>(
        'SELECT item_id, store_id FROM series ORDER BY series_id',
      );
      await db.close();
      const lines = ['item_id,store_id,day,value'];
      const c = Date.parse(`${cutoff}T00:00:00Z`) / 86_400_000;
      ids.rows.forEach((s, i) => {
        for (let h = 1; h <= 28; h++)
          lines.push(`${s.item_id},${s.store_id},${formatDay(c + h)},${((i % 5) + ((h * 7 + i) % 3)) / 2}`);
      });
      const file = join(dir, 'forecasts.csv');
      writeFileSync(file, `${lines.join('\n')}\n`);
      const r = child(['--child', 'score', '--schema', schema, '--cutoff', cutoff, '--forecasts', file]);
      line(
        `  larder score (${series} series x 28 days, 12 levels = ${r.series} series)  ${r.seconds!.toFixed(2)} s  peak RSS ${Math.round(r.maxRssMb!)} MB  (target < 30 s at 30,000 series)`,
      );
    }
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  await main(process.argv.slice(2));
}
