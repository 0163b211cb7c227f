import type { Config } from '../config/config.js';
import { formatDay, parseDay } from '../core/days.js';
import type { Db, DbSession } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import { BOTTOM_LEVEL, HIERARCHY_LEVELS } from './hierarchy-levels.js';
import {
  aggregatedScalesSql,
  bottomScalesSql,
  CREATE_BOTTOM,
  CREATE_DAILY,
  CREATE_DOLLARS,
  FILL_BOTTOM,
  FILL_DAILY_ITEM,
  FILL_DAILY_STORE,
  FILL_DOLLARS,
  weightsSql,
} from './scales-sql.js';

/** The weight window of the accuracy measure: dollar sales over the last 28 days. */
export const DEFAULT_WEIGHT_DAYS = 28;

/** ISO weekday (1 = Monday) of each configurable week start. */
const ISO_WEEKDAY = {
  monday: 1,
  tuesday: 2,
  wednesday: 3,
  thursday: 4,
  friday: 5,
  saturday: 6,
  sunday: 7,
} as const;

export interface MaterializeOptions {
  /** The cutoff `C` as `YYYY-MM-DD`: only sales on or before it are read. */
  readonly cutoff: string;
  /** Length of the weight window ending at the cutoff (default 28). */
  readonly weightDays?: number;
}

export interface LevelSummary {
  readonly level: number;
  readonly name: string;
  readonly series: number;
  /** Series without a usable scale (no sale, first sale on the cutoff, or flat). */
  readonly noScale: number;
  readonly dollars: number;
}

export interface MaterializeSummary {
  readonly cutoff: string;
  readonly weightDays: number;
  readonly bottomSeries: number;
  readonly evaluatedSeries: number;
  /** Bottom series with no sale on or before the cutoff: no scale, not evaluated. */
  readonly noSaleSeries: number;
  /** Series whose item or store is unknown or lacks a department, category or region. */
  readonly noHierarchySeries: number;
  readonly totalDollars: number;
  readonly levels: readonly LevelSummary[];
  /** Human-readable problems: excluded series, zero-dollar levels. */
  readonly problems: readonly string[];
}

/** Validates a cutoff given as text; a bad one is a usage error naming it. */
export function cutoffDay(cutoff: string): number {
  const d = parseDay(cutoff);
  if (d === null) throw new UsageError(`cutoff '${cutoff}' is not a valid day (YYYY-MM-DD)`);
  return d;
}

export function weightDaysOf(weightDays: number | undefined): number {
  const w = weightDays ?? DEFAULT_WEIGHT_DAYS;
  if (!Number.isInteger(w) || w < 1 || w > 3660) {
    throw new UsageError(`weight days must be an integer from 1 to 3660, got ${weightDays}`);
  }
  return w;
}

/** The newest loaded batch: a materialization records it, and a later load makes it stale. */
export async function latestLoadBatch(s: DbSession): Promise<number | null> {
  const r = await s.query<{ b: number | null }>(
    `SELECT max(batch_id) AS b FROM load_batches WHERE status = 'loaded'`,
  );
  return r.rows[0]?.b ?? null;
}

/**
 * Materializes the scales and weights of every series of the 12 levels as of the cutoff,
 * replacing any earlier materialization for the same cutoff (scales) and weight window (weights).
 * Runs in one transaction: readers see the old rows or the new ones, never a mix.
 */
export async function materializeScales(
  db: Db,
  config: Config,
  opts: MaterializeOptions,
): Promise<MaterializeSummary> {
  return db.transaction((tx) => materializeIn(tx, config, opts));
}

/** The same inside a caller's transaction (scoring materializes on demand in its own). */
export async function materializeIn(
  tx: DbSession,
  config: Config,
  opts: MaterializeOptions,
): Promise<MaterializeSummary> {
  const c = cutoffDay(opts.cutoff);
  const cutoff = formatDay(c);
  const weightDays = weightDaysOf(opts.weightDays);
  const weekStart = ISO_WEEKDAY[config.calendar.weekStartsOn];

  await tx.query('SELECT pg_advisory_xact_lock(hashtext($1))', [`larder.eval.${cutoff}`]);
  const last =
    (await tx.query<{ d: string | null }>('SELECT max(day)::text AS d FROM sales')).rows[0]?.d ?? null;
  if (last === null) throw new UsageError('there are no sales rows: load sales before materializing scales');
  if (last < cutoff) {
    throw new UsageError(
      `cutoff ${cutoff} is after the last sales day ${last}: days past it would count as zero sales`,
    );
  }

  await tx.exec(`DROP TABLE IF EXISTS ev_bottom, ev_daily_store, ev_daily_item, ev_dollars`);
  await tx.exec(CREATE_BOTTOM);
  await tx.query(FILL_BOTTOM, [cutoff]);
  await tx.exec(`${CREATE_DAILY}; ANALYZE ev_bottom`);
  await tx.query(FILL_DAILY_STORE, [cutoff]);
  await tx.query(FILL_DAILY_ITEM, [cutoff]);
  await tx.exec(CREATE_DOLLARS);
  await tx.query(FILL_DOLLARS, [cutoff, weightDays, weekStart]);
  await tx.exec('ANALYZE ev_daily_store; ANALYZE ev_daily_item; ANALYZE ev_dollars');

  await tx.query('DELETE FROM eval_scales WHERE cutoff = $1', [cutoff]);
  await tx.query('DELETE FROM eval_weights WHERE cutoff = $1 AND weight_days = $2', [cutoff, weightDays]);
  for (const level of HIERARCHY_LEVELS) {
    if (level.level === BOTTOM_LEVEL) await tx.query(bottomScalesSql(level), [cutoff]);
    else
      await tx.query(aggregatedScalesSql(level, level.level <= 9 ? 'ev_daily_store' : 'ev_daily_item'), [
        cutoff,
      ]);
    await tx.query(weightsSql(level), [cutoff, weightDays]);
  }

  const counts = (
    await tx.query<{
      bottom: number;
      evaluated: number;
      no_sale: number;
      all_series: number;
      dollars: number | null;
    }>(
      `SELECT (SELECT count(*) FROM ev_bottom)::int AS bottom,
              (SELECT count(*) FROM ev_bottom WHERE first_sale_day IS NOT NULL)::int AS evaluated,
              (SELECT count(*) FROM ev_bottom WHERE first_sale_day IS NULL)::int AS no_sale,
              (SELECT count(*) FROM series)::int AS all_series,
              (SELECT sum(dollars) FROM ev_dollars) AS dollars`,
    )
  ).rows[0]!;
  // Statistics for the rows just written: without them the planner guesses a few dozen rows per
  // cutoff and joins scales to weights in a nested loop, which took 30 s at 42k series here, for
  // this query and for every later score.
  await tx.exec('ANALYZE eval_scales; ANALYZE eval_weights');
  const perLevel = await tx.query<{
    level: number;
    series: number;
    no_scale: number;
    dollars: number | null;
  }>(
    `SELECT s.level, count(*)::int AS series, count(*) FILTER (WHERE s.status <> 'ok')::int AS no_scale,
            sum(w.dollars) AS dollars
     FROM eval_scales s
     LEFT JOIN eval_weights w ON w.cutoff = s.cutoff AND w.weight_days = $2 AND w.level = s.level AND w.key = s.key
     WHERE s.cutoff = $1 GROUP BY s.level ORDER BY s.level`,
    [cutoff, weightDays],
  );
  const loadBatch = await latestLoadBatch(tx);
  const totalDollars = counts.dollars ?? 0;
  const noHierarchy = counts.all_series - counts.bottom;
  await tx.query(
    `INSERT INTO eval_materializations (cutoff, weight_days, load_batch_id, bottom_series, evaluated_series,
       no_sale_series, no_hierarchy_series, total_dollars)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8)
     ON CONFLICT (cutoff, weight_days) DO UPDATE SET load_batch_id = EXCLUDED.load_batch_id,
       bottom_series = EXCLUDED.bottom_series, evaluated_series = EXCLUDED.evaluated_series,
       no_sale_series = EXCLUDED.no_sale_series, no_hierarchy_series = EXCLUDED.no_hierarchy_series,
       total_dollars = EXCLUDED.total_dollars, materialized_at = now()`,
    [
      cutoff,
      weightDays,
      loadBatch,
      counts.bottom,
      counts.evaluated,
      counts.no_sale,
      noHierarchy,
      totalDollars,
    ],
  );
  await tx.exec('DROP TABLE IF EXISTS ev_bottom, ev_daily_store, ev_daily_item, ev_dollars');

  const byLevel = new Map(perLevel.rows.map((r) => [r.level, r]));
  const levels = HIERARCHY_LEVELS.map((l) => {
    const r = byLevel.get(l.level);
    return {
      level: l.level,
      name: l.name,
      series: r?.series ?? 0,
      noScale: r?.no_scale ?? 0,
      dollars: r?.dollars ?? 0,
    };
  });
  const problems: string[] = [];
  if (counts.no_sale > 0) {
    problems.push(`${counts.no_sale} series have no sale on or before ${cutoff}: no scale, not evaluated`);
  }
  if (noHierarchy > 0) {
    problems.push(
      `${noHierarchy} series lack an item or store with department, category and region: not evaluated`,
    );
  }
  if (!(totalDollars > 0)) {
    problems.push(
      `dollar sales over the ${weightDays} days up to ${cutoff} are zero at every level (no prices, or no sales): ` +
        'weights are undefined, so no WRMSSE can be computed',
    );
  }
  for (const l of levels) {
    const flat = l.level === BOTTOM_LEVEL ? l.noScale - counts.no_sale : l.noScale;
    if (flat > 0)
      problems.push(
        `level ${l.level} ${l.name}: ${flat} series without a usable scale (first sale on the cutoff, or flat)`,
      );
  }
  return {
    cutoff,
    weightDays,
    bottomSeries: counts.bottom,
    evaluatedSeries: counts.evaluated,
    noSaleSeries: counts.no_sale,
    noHierarchySeries: noHierarchy,
    totalDollars,
    levels,
    problems,
  };
}
