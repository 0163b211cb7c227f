/**
 * `npm run bench -- build [--scale small|full] [--stores N --items N --days N] [--fresh] [--keep]
 *   [--refs a,b,c] [--concurrency N]` (--refs picks the references measured, default all three;
 *   --concurrency the partitions at once for the builds and the floor, default min(pool, cores))
 *
 * The feature build on a synthetic chain (full: 10 stores x 3,000 items x 1,900 days = 57M sales
 * rows; small: 10 x 30 x 1,900) in its own schema `bench_build` (kept between runs unless its
 * shape changes or --fresh; dropped at the end unless --keep). Cutoff at the last day, training
 * rows for the last 730 days. Measured in one run:
 *   build     the standard set of examples/larder.config.ts (42 features, all six families,
 *             stock-out mask on): wall time, rows/s, peak RSS (target < 2 GB);
 *   (a)       the I/O floor: per partition, the same COPY out of the input rows plus a COPY in of
 *             an output table of the same shape, at the same concurrency (target build <= 1.3x);
 *   windows   a set with only the lags and windows of the standard set (15 features, no mask);
 *   (b)       the same 15 features as one hand-written PostgreSQL statement (integer running
 *             sums, RANGE frames; target windows >= 3x faster);
 *   (c)       DuckDB computing them on the same rows streamed from PostgreSQL with its appender
 *             (target windows not slower).
 * Needs DATABASE_URL. Figures go to bench-output/build.json.
 */
import { mkdir, writeFile } from 'node:fs/promises';
import { availableParallelism } from 'node:os';
import { parseArgs } from 'node:util';
import { DuckDBDataChunk, DuckDBInstance, INTEGER } from '@duckdb/node-api';
import examples from '../examples/larder.config.js';
import { buildSnapshot } from '../src/build/build-snapshot.js';
import { salesCopySql } from '../src/build/partition-input.js';
import { SnapshotEncoder } from '../src/build/snapshot-encoder.js';
import { dayLiteral } from '../src/build/sql-text.js';
import { parseConfig } from '../src/config/config.js';
import { readEnv } from '../src/config/env.js';
import { formatDay, parseDay } from '../src/core/days.js';
import { readCopyBinary } from '../src/db/binary-copy.js';
import { type Db, quoteIdent } from '../src/db/database.js';
import { openDatabase } from '../src/db/open.js';
import { resolveFeatureSet } from '../src/features/feature-set.js';

const SCHEMA = 'bench_build';
const SCALES = {
  small: { stores: 10, items: 30, days: 1900 },
  full: { stores: 10, items: 3000, days: 1900 },
} as const;
const START = '2019-01-05';

interface Shape {
  readonly stores: number;
  readonly items: number;
  readonly days: number;
}

/** The synthetic chain, set-based: ~50% zero days, weekly prices, events, benefit days. */
async function generate(db: Db, s: Shape): Promise<void> {
  const start = `DATE '${START}'`;
  const t0 = performance.now();
  await db.exec(`
    INSERT INTO stores SELECT 'store' || lpad(k::text, 2, '0'), 'region' || (k % 3) FROM generate_series(1, ${s.stores}) k;
    INSERT INTO items SELECT 'item' || lpad(k::text, 5, '0'), 'dept' || (k % 7), 'cat' || (k % 3) FROM generate_series(1, ${s.items}) k;
    INSERT INTO series (item_id, store_id)
      SELECT 'item' || lpad(i::text, 5, '0'), 'store' || lpad(k::text, 2, '0')
      FROM generate_series(1, ${s.stores}) k, generate_series(1, ${s.items}) i ORDER BY k, i;
    INSERT INTO calendar_days SELECT ${start} + d FROM generate_series(0, ${s.days + 60}) d;
    INSERT INTO events SELECT ${start} + d, 'Fair ' || (d % 5), CASE d % 3 WHEN 0 THEN 'holiday' WHEN 1 THEN 'sporting' ELSE 'cultural' END
      FROM generate_series(3, ${s.days + 60}, 23) d;
    INSERT INTO benefit_days SELECT 'region' || r, ${start} + d FROM generate_series(0, 2) r, generate_series(0, ${s.days + 60}) d
      WHERE extract(day FROM ${start} + d) IN (1 + r, 10 + r, 20 + r);`);
  await db.exec(`
    INSERT INTO sales (series_id, day, units)
      SELECT r.series_id, ${start} + d,
        CASE WHEN abs(hashint8extended(r.series_id::int8 * 10000 + d, 1)) % 100 < 20 + r.series_id % 60 THEN 0
             ELSE 1 + (abs(hashint8extended(r.series_id::int8 * 10000 + d, 2)) % (1 + r.series_id % 9))::int4 END
      FROM series r, generate_series(0, ${s.days - 1}) d ORDER BY r.series_id, d`);
  await db.exec(`
    INSERT INTO prices (item_id, store_id, week_start, price)
      SELECT r.item_id, r.store_id, ${start} + 7 * w,
        round((1 + (r.series_id % 40) * 0.25) * (CASE WHEN abs(hashint8extended(r.series_id::int8 * 1000 + w, 3)) % 10 = 0 THEN 0.8 ELSE 1 END)
              * (1 + (w / 52) * 0.03), 2)
      FROM series r, generate_series(0, ${Math.ceil(s.days / 7)}) w;
    ANALYZE;
    CREATE TABLE bench_shape AS SELECT ${s.stores} AS stores, ${s.items} AS items, ${s.days} AS days;`);
  log(`generated ${s.stores} x ${s.items} x ${s.days} in ${((performance.now() - t0) / 1000).toFixed(1)} s`);
}

const log = (line: string) => process.stdout.write(`${line}\n`);
const secs = (ms: number) => (ms / 1000).toFixed(2);

/** Runs `fn` over the partitions, `limit` at a time (the build's own scheme). */
async function overPartitions<T>(
  parts: readonly string[],
  limit: number,
  fn: (p: string) => Promise<T>,
): Promise<T[]> {
  const queue = [...parts];
  const out: T[] = [];
  await Promise.all(
    Array.from({ length: Math.min(limit, parts.length) }, async () => {
      for (let p = queue.shift(); p !== undefined; p = queue.shift()) out.push(await fn(p));
    }),
  );
  return out;
}

const salesSql = salesCopySql;

/** (a) the I/O floor: COPY out the partition's input rows, COPY in as many output rows of the same shape. */
async function ioFloor(
  db: Db,
  parts: readonly string[],
  rowsPer: ReadonlyMap<string, number>,
  features: number,
  from: number | null,
  cutoff: number,
  limit: number,
) {
  const t0 = performance.now();
  await overPartitions(parts, limit, async (store) => {
    await db.session(async (s) => {
      // The build reads with JIT off (its statements are index range scans): so does the floor.
      await s.exec('SET jit = off');
      let n = 0;
      for await (const b of readCopyBinary(s.copyTo(salesSql(store, from, cutoff)), ['int4', 'date', 'int4']))
        n += b.length;
      const table = `bench_floor_${store}`;
      const cols = Array.from({ length: features }, (_, i) => `f${i} float8`).join(', ');
      await s.exec(
        `DROP TABLE IF EXISTS ${table}; CREATE TABLE ${table} (series_id int4, day date, origin date, is_predict bool, label int4, ${cols})`,
      );
      const total = rowsPer.get(store) ?? 0;
      // The build's own encoder, so the floor pays the same per-cell cost the build does.
      async function* chunks() {
        const enc = new SnapshotEncoder(features);
        const block = 1024;
        const cols = Array.from({ length: features }, (_, f) =>
          Float64Array.from({ length: block }, (_, r) => (r + f) * 0.25),
        );
        const day = new Int32Array(block).map((_, r) => cutoff - r);
        const rows = {
          n: 0,
          day,
          anchor: day,
          limit: day,
          origin: null,
          isPredict: new Uint8Array(block),
          label: new Float64Array(block).fill(3),
          trainRows: 0,
        };
        for (let r0 = 0; r0 < total; r0 += block) {
          enc.series(r0 >> 10, { ...rows, n: Math.min(block, total - r0) }, cols);
          yield* enc.take();
        }
        yield* enc.end();
      }
      await s.copyFrom(`COPY ${table} FROM STDIN (FORMAT binary)`, chunks());
      await s.exec('RESET jit');
      void n;
    });
  });
  const ms = performance.now() - t0;
  for (const p of parts) await db.exec(`DROP TABLE IF EXISTS bench_floor_${p}`);
  return ms;
}

/** The 15 window features of the comparison, as column expressions over frame sums. */
function windowSpecs(
  lags: readonly number[],
  windows: ReadonlyArray<{ size: number; shift: number; stats: readonly string[] }>,
) {
  return { lags, windows: windows.map((w) => ({ ...w, stats: w.stats.filter((s) => s !== 'ewm') })) };
}

/** (b) one PostgreSQL statement: RANGE frames over the sales rows plus the prediction rows. */
async function postgresStatement(
  db: Db,
  spec: ReturnType<typeof windowSpecs>,
  from: number,
  readFrom: number,
  cutoff: number,
  H: number,
) {
  const frames: string[] = [];
  const inner: string[] = [];
  const outer: string[] = [];
  for (const k of spec.lags) {
    inner.push(
      `max(units) OVER (PARTITION BY series_id ORDER BY day RANGE BETWEEN '${k} days' PRECEDING AND '${k} days' PRECEDING) AS lag_${k}`,
    );
    outer.push(`lag_${k}`);
  }
  spec.windows.forEach((w, i) => {
    frames.push(
      `w${i} AS (PARTITION BY series_id ORDER BY day RANGE BETWEEN '${w.shift + w.size - 1} days' PRECEDING AND '${w.shift} days' PRECEDING)`,
    );
    inner.push(`count(units) OVER w${i} AS n${i}, sum(units::int8) OVER w${i} AS s${i}`);
    const name = (st: string) => `${st}_${w.size}d_s${w.shift}`;
    for (const st of w.stats) {
      if (st === 'mean') outer.push(`CASE WHEN n${i} > 0 THEN s${i}::float8 / n${i} END AS ${name(st)}`);
      if (st === 'std') {
        inner.push(`sum(units::int8 * units) OVER w${i} AS q${i}`);
        outer.push(
          `CASE WHEN n${i} > 1 THEN sqrt(greatest(0, (n${i} * q${i} - s${i} * s${i})::float8 / (n${i} * (n${i} - 1)))) END AS ${name(st)}`,
        );
      }
      if (st === 'min') inner.push(`min(units) OVER w${i} AS ${name(st)}`);
      if (st === 'max') inner.push(`max(units) OVER w${i} AS ${name(st)}`);
      if (st === 'zero_share') {
        inner.push(`count(*) FILTER (WHERE units = 0) OVER w${i} AS z${i}`);
        outer.push(`CASE WHEN n${i} > 0 THEN z${i}::float8 / n${i} END AS ${name(st)}`);
      }
      if (st === 'min' || st === 'max') outer.push(name(st));
    }
  });
  const sql = `CREATE TABLE bench_pg_windows AS
    SELECT series_id, day, NULL::date AS origin, day > ${dayLiteral(cutoff)} AS is_predict, units AS label, ${outer.join(', ')}
    FROM (SELECT series_id, day, units, ${inner.join(', ')}
          FROM (SELECT series_id, day, units FROM sales WHERE day BETWEEN ${dayLiteral(readFrom)} AND ${dayLiteral(cutoff)}
                UNION ALL SELECT series_id, ${dayLiteral(cutoff)} + h, NULL FROM series, generate_series(1, ${H}) h) x
          WINDOW ${frames.join(', ')}) y
    WHERE day >= ${dayLiteral(from)}`;
  await db.exec('DROP TABLE IF EXISTS bench_pg_windows');
  const t0 = performance.now();
  await db.exec(sql);
  const ms = performance.now() - t0;
  const n = (await db.query<{ n: number }>('SELECT count(*)::int8 AS n FROM bench_pg_windows')).rows[0]!.n;
  await db.exec('DROP TABLE bench_pg_windows');
  return { ms, rows: Number(n) };
}

/** (c) DuckDB: the same rows streamed in through its appender, the same features in its SQL. */
async function duckdb(
  db: Db,
  parts: readonly string[],
  spec: ReturnType<typeof windowSpecs>,
  from: number,
  readFrom: number,
  cutoff: number,
  H: number,
) {
  const inst = await DuckDBInstance.create(':memory:');
  const con = await inst.connect();
  await con.run('CREATE TABLE sales (series_id INTEGER, day INTEGER, units INTEGER)');
  const t0 = performance.now();
  const app = await con.createAppender('sales');
  const chunk = DuckDBDataChunk.create([INTEGER, INTEGER, INTEGER]);
  for (const store of parts) {
    for await (const b of readCopyBinary(
      db.copyTo(salesSql(store, readFrom, cutoff)),
      ['int4', 'date', 'int4'],
      2048,
    )) {
      chunk.rowCount = b.length;
      for (let c = 0; c < 3; c++) chunk.setColumnValues(c, Array.from(b.columns[c] as Int32Array));
      app.appendDataChunk(chunk);
    }
  }
  app.flushSync();
  app.closeSync();
  const streamMs = performance.now() - t0;
  const frames: string[] = [];
  const cols: string[] = [];
  for (const k of spec.lags)
    cols.push(
      `max(units) OVER (PARTITION BY series_id ORDER BY day RANGE BETWEEN ${k} PRECEDING AND ${k} PRECEDING) AS lag_${k}`,
    );
  spec.windows.forEach((w, i) => {
    frames.push(
      `w${i} AS (PARTITION BY series_id ORDER BY day RANGE BETWEEN ${w.shift + w.size - 1} PRECEDING AND ${w.shift} PRECEDING)`,
    );
    const name = (st: string) => `${st}_${w.size}d_s${w.shift}`;
    for (const st of w.stats) {
      if (st === 'mean') cols.push(`avg(units) OVER w${i} AS ${name(st)}`);
      if (st === 'std') cols.push(`stddev_samp(units) OVER w${i} AS ${name(st)}`);
      if (st === 'min') cols.push(`min(units) OVER w${i} AS ${name(st)}`);
      if (st === 'max') cols.push(`max(units) OVER w${i} AS ${name(st)}`);
      if (st === 'zero_share')
        cols.push(
          `avg(CASE WHEN units = 0 THEN 1.0 WHEN units IS NOT NULL THEN 0.0 END) OVER w${i} AS ${name(st)}`,
        );
    }
  });
  const C = cutoff;
  await con.run(`CREATE TABLE out AS SELECT * FROM (
      SELECT series_id, day, units AS label, ${cols.join(', ')}
      FROM (SELECT * FROM sales UNION ALL SELECT DISTINCT series_id, ${C} + h, NULL FROM sales, range(1, ${H + 1}) t(h))
      WINDOW ${frames.join(', ')}) WHERE day >= ${from}`);
  const ms = performance.now() - t0;
  const n = Number(
    (await con.runAndReadAll('SELECT count(*)::INTEGER AS n FROM out')).getRowObjectsJS()[0]!.n,
  );
  con.closeSync();
  return { ms, streamMs, rows: n };
}

export async function main(argv: string[]): Promise<void> {
  const { values: o } = parseArgs({
    args: argv,
    options: {
      scale: { type: 'string', default: 'full' },
      stores: { type: 'string' },
      items: { type: 'string' },
      days: { type: 'string' },
      fresh: { type: 'boolean', default: false },
      keep: { type: 'boolean', default: false },
      refs: { type: 'string', default: 'a,b,c' },
      concurrency: { type: 'string' },
    },
  });
  const base = SCALES[o.scale as keyof typeof SCALES];
  if (!base) throw new Error(`--scale: small or full, got '${o.scale}'`);
  const shape: Shape = {
    stores: Number(o.stores ?? base.stores),
    items: Number(o.items ?? base.items),
    days: Number(o.days ?? base.days),
  };
  const env = readEnv();
  if (!env.DATABASE_URL) throw new Error('bench build needs DATABASE_URL (a PostgreSQL server)');
  const config = parseConfig(
    { ...examples, database: { url: env.DATABASE_URL, schema: SCHEMA, poolSize: 4 } },
    'bench',
  );
  const admin = await openDatabase(config, { migrate: false, poolSize: 1 });
  const have = await admin
    .query<Shape>(`SELECT stores, items, days FROM ${quoteIdent(SCHEMA)}.bench_shape`)
    .then((r) => r.rows[0])
    .catch(() => undefined);
  const same = have && have.stores === shape.stores && have.items === shape.items && have.days === shape.days;
  if (!same || o.fresh) await admin.exec(`DROP SCHEMA IF EXISTS ${quoteIdent(SCHEMA)} CASCADE`);
  await admin.close();
  const db = await openDatabase(config, { poolSize: 4 });
  try {
    if (!same || o.fresh) await generate(db, shape);
    const cutoff = parseDay(START)! + shape.days - 1;
    const limit = o.concurrency ? Number(o.concurrency) : Math.min(db.parallelism, availableParallelism());
    const parts = (
      await db.query<{ store_id: string }>('SELECT DISTINCT store_id FROM series ORDER BY 1')
    ).rows.map((r) => r.store_id);
    const salesRows = Number(
      (await db.query<{ n: number }>('SELECT count(*)::int8 AS n FROM sales')).rows[0]!.n,
    );
    log(
      `build benchmark: ${shape.stores} stores x ${shape.items} items x ${shape.days} days = ${salesRows.toLocaleString('en')} sales rows; cutoff ${formatDay(cutoff)}; concurrency ${limit}`,
    );
    // Warm the page cache the way a nightly build finds it (DESIGN.md measured with data cached).
    await overPartitions(parts, limit, async (p) => {
      for await (const _ of db.copyTo(salesSql(p, null, cutoff)));
    });

    // The standard set.
    const std = resolveFeatureSet(config, 'standard');
    const rss0 = process.memoryUsage().rss;
    const cpu0 = process.cpuUsage();
    const t0 = performance.now();
    const info = await buildSnapshot(
      db,
      config,
      { set: 'standard', cutoff: formatDay(cutoff) },
      { concurrency: limit },
    );
    const buildMs = performance.now() - t0;
    const buildCpu = process.cpuUsage(cpu0);
    const peakRss = process.resourceUsage().maxRSS * 1024;
    const rowsPer = new Map<string, number>();
    for (const p of parts) rowsPer.set(p, 0);
    for (const r of (
      await db.query<{ store_id: string; n: number }>(
        `SELECT r.store_id, count(*)::int8 AS n FROM ${quoteIdent(info.tableName)} t JOIN series r USING (series_id) GROUP BY 1`,
      )
    ).rows)
      rowsPer.set(r.store_id, Number(r.n));
    // The standard set masks stock-outs, so its build reads the whole history.
    const readFromStd = std.stockout ? null : parseDay(info.trainFrom)!;
    const refs = new Set(o.refs.split(','));
    const cpu1 = process.cpuUsage();
    const floorMs = refs.has('a')
      ? await ioFloor(db, parts, rowsPer, std.columns.length, readFromStd, cutoff, limit)
      : Number.NaN;
    const floorCpu = process.cpuUsage(cpu1);

    // The window-only set and its two references.
    const def = std.definition;
    const winSet = {
      name: 'bench_windows',
      horizon: def.horizon,
      training: def.training,
      families: {
        lags: def.families.lags!,
        windows: def.families.windows!.map((w) => ({ ...w, stats: w.stats.filter((s) => s !== 'ewm') })),
      },
    };
    const wconfig = parseConfig(
      { ...examples, sets: [winSet], database: { url: env.DATABASE_URL, schema: SCHEMA, poolSize: 4 } },
      'bench',
    );
    const t1 = performance.now();
    const winfo = await buildSnapshot(
      db,
      wconfig,
      { set: 'bench_windows', cutoff: formatDay(cutoff) },
      { concurrency: limit },
    );
    const windowsMs = performance.now() - t1;
    const spec = windowSpecs(def.families.lags!.days, def.families.windows!);
    const from = parseDay(winfo.trainFrom)!;
    const reach = Math.max(...spec.lags, ...spec.windows.map((w) => w.shift + w.size - 1));
    const skipped = { ms: Number.NaN, streamMs: Number.NaN, rows: 0 };
    const pgRef = refs.has('b')
      ? await postgresStatement(db, spec, from, from - reach, cutoff, def.horizon)
      : skipped;
    const duck = refs.has('c')
      ? await duckdb(db, parts, spec, from, from - reach, cutoff, def.horizon)
      : skipped;

    const figures = {
      shape,
      salesRows,
      concurrency: limit,
      standard: {
        features: info.columns.length,
        rows: info.rowCount,
        seconds: buildMs / 1000,
        rowsPerSecond: info.rowCount / (buildMs / 1000),
        peakRssMB: peakRss / 2 ** 20,
        nodeCpuSeconds: (buildCpu.user + buildCpu.system) / 1e6,
        rssBeforeMB: rss0 / 2 ** 20,
        timings: info.timings,
      },
      ioFloorSeconds: floorMs / 1000,
      ioFloorNodeCpuSeconds: (floorCpu.user + floorCpu.system) / 1e6,
      windows: { features: winfo.columns.length, rows: winfo.rowCount, seconds: windowsMs / 1000 },
      postgresStatement: { seconds: pgRef.ms / 1000, rows: pgRef.rows },
      duckdb: { seconds: duck.ms / 1000, streamSeconds: duck.streamMs / 1000, rows: duck.rows },
      ratios: {
        buildOverFloor: buildMs / floorMs,
        postgresOverWindows: pgRef.ms / windowsMs,
        duckdbOverWindows: duck.ms / windowsMs,
      },
    };
    log(
      `  standard set   ${secs(buildMs)} s  ${info.rowCount.toLocaleString('en')} rows x ${info.columns.length} features  ${Math.round(figures.standard.rowsPerSecond).toLocaleString('en')} rows/s  peak RSS ${figures.standard.peakRssMB.toFixed(0)} MB`,
    );
    log(
      `  (a) I/O floor  ${secs(floorMs)} s  (COPY out of the input rows + COPY in of ${info.rowCount.toLocaleString('en')} rows of the same shape)`,
    );
    log(
      `  Node CPU       build ${figures.standard.nodeCpuSeconds.toFixed(2)} s, floor ${figures.ioFloorNodeCpuSeconds.toFixed(2)} s`,
    );
    log(
      `  windows only   ${secs(windowsMs)} s  ${winfo.rowCount.toLocaleString('en')} rows x ${winfo.columns.length} features`,
    );
    log(`  (b) PostgreSQL ${secs(pgRef.ms)} s  one statement, ${pgRef.rows.toLocaleString('en')} rows`);
    log(
      `  (c) DuckDB     ${secs(duck.ms)} s  (${secs(duck.streamMs)} s streaming in), ${duck.rows.toLocaleString('en')} rows, results kept in DuckDB`,
    );
    log(`  build / (a) = ${figures.ratios.buildOverFloor.toFixed(2)} (target <= 1.3)`);
    log(`  (b) / windows = ${figures.ratios.postgresOverWindows.toFixed(2)} (target >= 3)`);
    log(`  (c) / windows = ${figures.ratios.duckdbOverWindows.toFixed(2)} (target >= 1)`);
    log(`  peak RSS ${figures.standard.peakRssMB.toFixed(0)} MB (target < 2048)`);
    await mkdir('bench-output', { recursive: true });
    await writeFile('bench-output/build.json', JSON.stringify(figures, null, 2));
  } finally {
    if (!o.keep) await db.exec(`DROP SCHEMA IF EXISTS ${quoteIdent(SCHEMA)} CASCADE`).catch(() => {});
    await db.close();
  }
}
