import { randomBytes } from 'node:crypto';
import type { Config } from '../config/config.js';
import { formatDay, parseDay } from '../core/days.js';
import { type Db, quoteIdent, safeIdent } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import { openDatabase } from '../db/open.js';
import { migrate } from '../db/migrate.js';
import type { FeatureColumn } from '../features/family.js';
import { type ResolvedFeatureSet, resolveFeatureSet } from '../features/feature-set.js';
import { type GroupLevel, LEVELS } from '../features/group-levels.js';
import { buildWindow } from './build-plan.js';
import { buildSnapshot } from './build-snapshot.js';
import { levelKeySql } from './group-stage.js';
import { dayLiteral } from './sql-text.js';

export interface AuditRequest {
  readonly set: string;
  readonly cutoff: string;
  readonly from?: string | undefined;
}

export interface AuditOptions {
  /** Series sampled (their groups' members are copied too). Default 100. */
  readonly sample?: number;
  /** Boundaries probed: the cutoff and this many more spread over the span. Default 6. */
  readonly probes?: number;
  readonly seed?: number;
  /** Internal (tests): audit a compiled set instead of the config's. */
  readonly featureSet?: ResolvedFeatureSet;
  readonly onProgress?: (line: string) => void;
}

/** One changed cell: the evidence of a leak. */
export interface ChangedCell {
  readonly seriesId: number;
  readonly day: string;
  readonly origin: string | null;
  readonly feature: string;
  /** The newest day the cell may depend on (its declared boundary). */
  readonly boundary: string | null;
  readonly probe: string;
  readonly before: number | null;
  readonly after: number | null;
}

export interface AuditReport {
  readonly set: string;
  readonly cutoff: string;
  readonly sampledSeries: number;
  readonly copiedSeries: number;
  readonly probes: ReadonlyArray<{
    readonly after: string;
    readonly cellsChecked: number;
    readonly changed: number;
    readonly missingRows: number;
  }>;
  readonly cellsChecked: number;
  readonly changedCells: number;
  readonly byFeature: Readonly<Record<string, number>>;
  readonly examples: readonly ChangedCell[];
}

// Tables copied into the scratch database, with the columns in the order COPY moves them.
const RAW: ReadonlyArray<[string, string]> = [
  ['items', 'item_id, dept_id, category_id'],
  ['stores', 'store_id, region_id'],
  ['calendar_days', 'day'],
  ['events', 'day, name, kind'],
  ['benefit_days', 'region_id, day'],
];

function setLevels(set: ResolvedFeatureSet): GroupLevel[] {
  const out = new Set<GroupLevel>();
  for (const f of set.families) for (const l of f.family.needs(f.params, set.shape).levels) out.add(l);
  return [...out];
}

/** The newest day a cell may depend on, as SQL over the snapshot row b (null: no sales at all). */
function boundarySql(c: FeatureColumn, mode: 'shift' | 'origin', cutoff: number): string | null {
  if (c.source !== 'sales') return null;
  return mode === 'shift'
    ? `least(${dayLiteral(cutoff)}, b.day - ${c.shift})`
    : `least(b.origin, b.origin + 1 - ${c.shift})`;
}

/**
 * The leak audit (DESIGN.md): copies a sample of series, with every member of their groups
 * and the prices of their departments, into a scratch database; builds the set there; then for
 * each probed day B perturbs every sales value after B (changed, zeroed in runs, or deleted)
 * and every price past the price boundary, rebuilds, and compares every cell whose declared
 * boundary is on or before B (calendar and price cells: always). Any changed cell is a leak.
 */
export async function auditSnapshot(
  db: Db,
  config: Config,
  req: AuditRequest,
  opts: AuditOptions = {},
): Promise<AuditReport> {
  const set = opts.featureSet ?? resolveFeatureSet(config, req.set);
  const C = parseDay(req.cutoff);
  if (C === null) throw new UsageError(`cutoff: '${req.cutoff}' is not an ISO 8601 day (YYYY-MM-DD)`);
  const sampleSize = opts.sample ?? 100;
  const seed = opts.seed ?? 1;
  const progress = opts.onProgress ?? (() => {});
  const def = set.definition;
  const from =
    req.from !== undefined
      ? parseDay(req.from)
      : def.training.from !== undefined
        ? parseDay(def.training.from)
        : C - (def.training.days ?? 730) + 1;
  if (from === null) throw new UsageError(`from: '${req.from}' is not an ISO 8601 day (YYYY-MM-DD)`);
  const w = buildWindow(set, C, from);

  // The sample, and every series sharing a group with it (group values need all members).
  const sampled = (
    await db.query<{ series_id: number }>(
      `SELECT series_id FROM series r WHERE EXISTS (SELECT 1 FROM sales s WHERE s.series_id = r.series_id AND s.day <= $1)
       ORDER BY hashint8extended(series_id, $2) LIMIT $3`,
      [formatDay(C), seed, sampleSize],
    )
  ).rows.map((r) => r.series_id);
  if (sampled.length === 0)
    throw new UsageError(`no series has sales on or before ${formatDay(C)}: nothing to audit`);
  const levels = new Set<GroupLevel>();
  for (const l of setLevels(set)) {
    levels.add(l);
    const parent = LEVELS[l].parent;
    if (parent && def.families.encodings) levels.add(parent);
  }
  const closure = new Set(sampled);
  const from3 =
    'FROM series r LEFT JOIN items i ON i.item_id = r.item_id LEFT JOIN stores st ON st.store_id = r.store_id';
  for (const level of levels) {
    const k = levelKeySql(level);
    const rows = (
      await db.query<{ series_id: number }>(
        `SELECT r.series_id ${from3} WHERE ${k} IN (SELECT ${k} ${from3} WHERE r.series_id = ANY($1::int4[]))`,
        [sampled],
      )
    ).rows;
    for (const r of rows) closure.add(r.series_id);
  }
  const ids = [...closure].sort((a, b) => a - b);
  progress(`sampled ${sampled.length} series; copying ${ids.length} with their groups' members`);

  const scratch = await openScratch(db, config);
  try {
    const s = scratch.db;
    const pipe = async (select: string, table: string, cols: string) => {
      await s.copyFrom(
        `COPY ${table} (${cols}) FROM STDIN (FORMAT binary)`,
        db.copyTo(`COPY (${select}) TO STDOUT (FORMAT binary)`),
      );
    };
    const idList = `ARRAY[${ids.join(',')}]::int4[]`;
    for (const [table, cols] of RAW) await pipe(`SELECT ${cols} FROM ${table}`, table, cols);
    await pipe(
      `SELECT series_id, item_id, store_id FROM series WHERE series_id = ANY(${idList})`,
      'series',
      'series_id, item_id, store_id',
    );
    await pipe(
      `SELECT series_id, day, units FROM sales WHERE series_id = ANY(${idList})`,
      'sales',
      'series_id, day, units',
    );
    // Prices of the copied stores' departments: the department comparisons need them all.
    await pipe(
      `SELECT p.item_id, p.store_id, p.week_start, p.price FROM prices p LEFT JOIN items i ON i.item_id = p.item_id
       WHERE (p.store_id, coalesce(i.dept_id, '')) IN (
         SELECT r.store_id, coalesce(i2.dept_id, '') FROM series r LEFT JOIN items i2 ON i2.item_id = r.item_id WHERE r.series_id = ANY(${idList}))`,
      'prices',
      'item_id, store_id, week_start, price',
    );
    await s.exec(
      `CREATE TABLE audit_sales AS SELECT * FROM sales; CREATE TABLE audit_prices AS SELECT * FROM prices;`,
    );

    const build = async () => {
      const info = await buildSnapshot(s, config, req, { featureSet: set });
      // Take the table out of the catalogue so the next build does not replace it.
      await s.query('DELETE FROM snapshots WHERE snapshot_id = $1', [info.snapshotId]);
      return info.tableName;
    };
    progress('building the unperturbed snapshot');
    const base = await build();

    const probes = probeDays(C, w.anchorLo, set, opts.probes ?? 6, seed);
    const PB = w.priceBoundary;
    const report: Array<{ after: string; cellsChecked: number; changed: number; missingRows: number }> = [];
    const byFeature: Record<string, number> = {};
    const examples: ChangedCell[] = [];
    for (const [i, B] of probes.entries()) {
      await s.exec(`TRUNCATE sales; INSERT INTO sales SELECT * FROM audit_sales;
        TRUNCATE prices; INSERT INTO prices SELECT * FROM audit_prices;`);
      await s.exec(perturbSql(B, PB, seed + i));
      progress(
        `probe ${i + 1}/${probes.length}: sales after ${formatDay(B)} and prices after ${formatDay(PB)} perturbed`,
      );
      const probe = await build();
      const r = await compareSnapshots(s, base, probe, set, C, B, formatDay(B));
      report.push({
        after: formatDay(B),
        cellsChecked: r.checked,
        changed: r.changed,
        missingRows: r.missingRows,
      });
      for (const [f, n] of Object.entries(r.byFeature)) byFeature[f] = (byFeature[f] ?? 0) + n;
      for (const e of r.examples) if (examples.length < 20) examples.push(e);
      await s.exec(`DROP TABLE ${quoteIdent(probe)}`);
    }
    return {
      set: set.name,
      cutoff: formatDay(C),
      sampledSeries: sampled.length,
      copiedSeries: ids.length,
      probes: report,
      cellsChecked: report.reduce((a, p) => a + p.cellsChecked, 0),
      changedCells: report.reduce((a, p) => a + p.changed + p.missingRows, 0),
      byFeature,
      examples,
    };
  } finally {
    await scratch.drop();
  }
}

/** The cutoff, the last training day before it, and more days spread over the span (seeded). */
function probeDays(
  C: number,
  anchorLo: number,
  set: ResolvedFeatureSet,
  extra: number,
  seed: number,
): number[] {
  const gaps = set.columns.filter((c) => c.source === 'sales').map((c) => c.shift);
  const lo = anchorLo - (gaps.length ? Math.max(...gaps) : 0);
  const days = new Set<number>([C, C - 1, C - set.shape.horizon]);
  let x = seed * 2654435761;
  for (let k = 0; k < extra; k++) {
    x = (x * 1103515245 + 12345) % 2147483648;
    days.add(lo + (x % Math.max(1, C - lo)));
  }
  return [...days].filter((d) => d >= lo && d <= C).sort((a, b) => b - a);
}

/** Changes every sales value after B (a different count, zero runs of about ten days, or gone) and every price past PB. */
function perturbSql(B: number, PB: number, salt: number): string {
  const h = (expr: string) => `abs(hashint8extended(${expr}, ${salt}))`;
  const key = `series_id::int8 * 100000 + (day - DATE '1970-01-01')`;
  return `
    DELETE FROM sales WHERE day > ${dayLiteral(B)} AND ${h(key)} % 13 = 0;
    UPDATE sales SET units = CASE
        WHEN ${h(`series_id::int8 * 10000 + (day - DATE '1970-01-01') / 10`)} % 4 = 0 THEN 0
        ELSE units + 1 + (${h(key)} % 9)::int4 END
      WHERE day > ${dayLiteral(B)};
    UPDATE prices SET price = round(price * 1.5 + 0.37, 4) WHERE week_start > ${dayLiteral(PB)};`;
}

async function compareSnapshots(
  s: Db,
  base: string,
  probe: string,
  set: ResolvedFeatureSet,
  C: number,
  B: number,
  probeText: string,
) {
  const mode = set.shape.mode;
  const on = 'p.series_id = b.series_id AND p.day = b.day AND p.origin IS NOT DISTINCT FROM b.origin';
  // A cell must hold when its boundary is on or before B; cells without sales input, always.
  const guard = (c: FeatureColumn) => {
    const bd = boundarySql(c, mode, C);
    return bd === null ? 'true' : `${bd} <= ${dayLiteral(B)}`;
  };
  const parts = set.columns.flatMap((c, k) => {
    const q = quoteIdent(safeIdent(c.name, 'feature name'));
    return [
      `count(*) FILTER (WHERE ${guard(c)}) AS c${k}`,
      `count(*) FILTER (WHERE ${guard(c)} AND b.${q} IS DISTINCT FROM p.${q}) AS x${k}`,
    ];
  });
  const label = `count(*) FILTER (WHERE b.day <= ${dayLiteral(B)} AND b.label IS DISTINCT FROM p.label) AS xl`;
  const r = (
    await s.query<Record<string, number>>(
      `SELECT ${parts.join(', ')}, ${label} FROM ${quoteIdent(base)} b JOIN ${quoteIdent(probe)} p ON ${on}`,
    )
  ).rows[0]!;
  // A row exists when its target day has a sales row (or it is a prediction row), so rows of
  // days up to B must be in both.
  const missing = (
    await s.query<{ n: number }>(
      `SELECT count(*)::int8 AS n FROM ${quoteIdent(base)} b WHERE b.day <= ${dayLiteral(B)}
       AND NOT EXISTS (SELECT 1 FROM ${quoteIdent(probe)} p WHERE ${on})`,
    )
  ).rows[0]!;
  let checked = 0;
  let changed = Number(r.xl ?? 0);
  const byFeature: Record<string, number> = {};
  if (changed) byFeature.label = changed;
  const examples: ChangedCell[] = [];
  for (const [k, c] of set.columns.entries()) {
    checked += Number(r[`c${k}`]);
    const x = Number(r[`x${k}`]);
    if (!x) continue;
    changed += x;
    byFeature[c.name] = x;
    const q = quoteIdent(c.name);
    const bd = boundarySql(c, mode, C);
    const rows = (
      await s.query<{
        series_id: number;
        day: string;
        origin: string | null;
        bnd: string | null;
        a: number | null;
        z: number | null;
      }>(
        `SELECT b.series_id, b.day, b.origin, ${bd ?? 'NULL::date'} AS bnd, b.${q} AS a, p.${q} AS z
         FROM ${quoteIdent(base)} b JOIN ${quoteIdent(probe)} p ON ${on}
         WHERE ${guard(c)} AND b.${q} IS DISTINCT FROM p.${q} ORDER BY b.series_id, b.origin, b.day LIMIT 3`,
      )
    ).rows;
    for (const e of rows)
      examples.push({
        seriesId: e.series_id,
        day: e.day,
        origin: e.origin,
        feature: c.name,
        boundary: e.bnd,
        probe: probeText,
        before: e.a,
        after: e.z,
      });
  }
  return { checked, changed, missingRows: Number(missing.n), byFeature, examples };
}

/**
 * A scratch database for the audit: a fresh schema on the server, or an in-memory embedded
 * database when the chain itself is embedded (one PGlite cannot hold two search paths).
 */
async function openScratch(db: Db, config: Config): Promise<{ db: Db; drop(): Promise<void> }> {
  if (db.kind === 'embedded') {
    const { openPgliteDatabase } = await import('../db/pglite-database.js');
    const mem = await openPgliteDatabase(undefined, 'larder_audit');
    await migrate(mem);
    return { db: mem, drop: () => mem.close() };
  }
  const name = safeIdent(
    `${db.schema.slice(0, 40)}_audit_${randomBytes(4).toString('hex')}`,
    'scratch schema',
  );
  const scratch = await openDatabase(config, { schema: name, poolSize: Math.max(2, db.parallelism) });
  return {
    db: scratch,
    async drop() {
      try {
        await scratch.exec(`DROP SCHEMA IF EXISTS ${quoteIdent(name)} CASCADE`);
      } finally {
        await scratch.close();
      }
    },
  };
}
