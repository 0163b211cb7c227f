import { basename } from 'node:path';
import type { Config } from '../config/config.js';
import { formatDay } from '../core/days.js';
import { readCopyBinary } from '../db/binary-copy.js';
import type { Db, DbSession } from '../db/database.js';
import { LarderError, UsageError } from '../db/errors.js';
import { readForecasts, openForecastFile } from './forecast-file.js';
import {
  aggregateBottomUp,
  type BottomSeries,
  groupBottom,
  HIERARCHY_LEVELS,
  KEY_SEPARATOR,
} from './hierarchy-levels.js';
import { cutoffDay, latestLoadBatch, materializeIn, weightDaysOf } from './materialize-scales.js';
import { rmsse, weightedLevelScore, wrmsse } from './metrics.js';
import { naiveForecast, seasonalNaiveForecast } from './reference-forecasts.js';

export interface ScoreOptions {
  readonly cutoff: string;
  /** Bottom-level forecasts (CSV or Parquet); without one only the reference forecasts are scored. */
  readonly forecastsPath?: string;
  /** Horizon H; default: the forecasts' span, or the horizon of `set`'s snapshot at the cutoff. */
  readonly horizon?: number;
  /** A feature set whose snapshot at the cutoff gives the horizon. */
  readonly set?: string;
  readonly weightDays?: number;
  /** Record the scores in `eval_scores` (default true). */
  readonly record?: boolean;
}

export interface LevelResult {
  readonly level: number;
  readonly name: string;
  readonly series: number;
  /** Weighted RMSSE of the level; NaN when undefined (no weights, or no scaled series). */
  readonly score: number;
  readonly excluded: number;
  readonly excludedWeight: number;
}

export interface SourceResult {
  /** The forecasts file's name, `naive` or `seasonal_naive`. */
  readonly source: string;
  readonly wrmsse: number;
  readonly levels: readonly LevelResult[];
}

export interface SeriesResult {
  readonly level: number;
  readonly key: string;
  readonly scale: number;
  readonly weight: number;
  /** RMSSE per source, in `sources` order. */
  readonly rmsse: readonly number[];
}

export interface ScoreResult {
  readonly cutoff: string;
  readonly horizon: number;
  readonly weightDays: number;
  /** True when scales and weights were (re)materialized for this score. */
  readonly materialized: boolean;
  readonly sources: readonly SourceResult[];
  readonly series: readonly SeriesResult[];
  readonly problems: readonly string[];
}

interface ScaleRow {
  level: number;
  key: string;
  scale: number | null;
  status: string;
  weight: number | null;
}

/**
 * Scores bottom-level forecasts against the actuals over the 12 levels, beside the naive and
 * seasonal naive forecasts. One transaction: a refused file, a missing actual or any failure
 * leaves nothing written (scales materialized on demand roll back with it).
 */
export async function scoreForecasts(db: Db, config: Config, opts: ScoreOptions): Promise<ScoreResult> {
  const c = cutoffDay(opts.cutoff);
  const cutoff = formatDay(c);
  const weightDays = weightDaysOf(opts.weightDays);
  if (
    opts.horizon !== undefined &&
    (!Number.isInteger(opts.horizon) || opts.horizon < 1 || opts.horizon > 3660)
  ) {
    throw new UsageError(`horizon must be a positive integer, got ${opts.horizon}`);
  }
  const source = opts.forecastsPath ? openForecastFile(opts.forecastsPath) : undefined;
  return db.transaction(async (tx) => {
    const problems: string[] = [];
    const mat = await tx.query<{ load_batch_id: number | null }>(
      'SELECT load_batch_id FROM eval_materializations WHERE cutoff = $1 AND weight_days = $2',
      [cutoff, weightDays],
    );
    const fresh = mat.rows[0] !== undefined && mat.rows[0].load_batch_id === (await latestLoadBatch(tx));
    if (!fresh) problems.push(...(await materializeIn(tx, config, { cutoff, weightDays })).problems);
    else problems.push(...(await storedProblems(tx, cutoff, weightDays)));

    const horizonGiven = opts.horizon ?? (opts.set ? await setHorizon(tx, opts.set, cutoff) : undefined);
    if (!source && horizonGiven === undefined) {
      throw new UsageError('without a forecasts file, give the horizon (--horizon N) or a set (--set NAME)');
    }
    const bottom = await evaluatedBottom(tx, cutoff);
    const index = new Map(bottom.map((b, i) => [`${b.item_id}${KEY_SEPARATOR}${b.store_id}`, i]));
    const user = source
      ? await readForecasts(source, { index, cutoff: c, horizon: horizonGiven })
      : undefined;
    const horizon = user?.horizon ?? horizonGiven!;

    const ids = Int32Array.from(bottom, (b) => b.seriesId);
    // One read of days C-6 .. C+H: the last week feeds the reference forecasts, the rest are actuals.
    const window = await dailyMatrix(tx, cutoff, ids, c - 6, 7 + horizon);
    const needed = formatDay(c + horizon);
    if (window.lastDay < c + horizon) {
      const seen = window.lastDay > c ? formatDay(window.lastDay) : `${cutoff} or earlier`;
      throw new UsageError(
        `actual sales end at ${seen}: scoring ${horizon} days after ${cutoff} needs sales up to ${needed}`,
      );
    }
    const lastWeek = new Float64Array(ids.length * 7);
    const actual = new Float64Array(ids.length * horizon);
    for (let i = 0; i < ids.length; i++) {
      const row = window.values.subarray(i * (7 + horizon), (i + 1) * (7 + horizon));
      lastWeek.set(row.subarray(0, 7), i * 7);
      actual.set(row.subarray(7), i * horizon);
    }
    const forecasts: Array<[string, Float64Array]> = [];
    if (user && source) forecasts.push([basename(source.path), user.values]);
    forecasts.push(['naive', naiveForecast(lastWeek, bottom.length, horizon)]);
    forecasts.push(['seasonal_naive', seasonalNaiveForecast(lastWeek, bottom.length, horizon)]);

    const scales = await tx.query<ScaleRow>(
      `SELECT s.level, s.key, s.scale, s.status, w.weight FROM eval_scales s
       LEFT JOIN eval_weights w ON w.cutoff = s.cutoff AND w.weight_days = $2 AND w.level = s.level AND w.key = s.key
       WHERE s.cutoff = $1 AND s.status <> 'no_sale'`,
      [cutoff, weightDays],
    );
    const byLevel = new Map<number, Map<string, ScaleRow>>();
    for (const r of scales.rows) {
      let m = byLevel.get(r.level);
      if (!m) {
        m = new Map();
        byLevel.set(r.level, m);
      }
      m.set(r.key, r);
    }

    const levelResults = forecasts.map(() => [] as LevelResult[]);
    const series: SeriesResult[] = [];
    for (const level of HIERARCHY_LEVELS) {
      const g = groupBottom(level, bottom);
      const n = g.keys.length;
      const rows = g.keys.map((k) => {
        const r = byLevel.get(level.level)?.get(k);
        if (!r)
          throw new LarderError(
            'EVAL_STALE',
            `level ${level.name} series '${k}' has no materialized scale: rerun larder scales`,
          );
        return r;
      });
      const weights = Float64Array.from(rows, (r) => r.weight ?? Number.NaN);
      const hasWeights = rows.some((r) => r.weight !== null);
      const scaleOf = Float64Array.from(rows, (r) => (r.status === 'ok' ? r.scale! : Number.NaN));
      const act = aggregateBottomUp(actual, g.groupOf, n, horizon);
      const perSource = forecasts.map(([, values], f) => {
        const agg = aggregateBottomUp(values, g.groupOf, n, horizon);
        const r = new Float64Array(n);
        for (let i = 0; i < n; i++) {
          const a = act.subarray(i * horizon, (i + 1) * horizon);
          r[i] = rmsse(a, agg.subarray(i * horizon, (i + 1) * horizon), scaleOf[i]!);
        }
        const ls = weightedLevelScore(r, hasWeights ? weights : null);
        levelResults[f]!.push({ level: level.level, name: level.name, series: n, ...ls });
        return r;
      });
      for (let i = 0; i < n; i++) {
        series.push({
          level: level.level,
          key: g.keys[i]!,
          scale: scaleOf[i]!,
          weight: weights[i]!,
          rmsse: perSource.map((r) => r[i]!),
        });
      }
    }
    const sources = forecasts.map(([name], f) => ({
      source: name,
      levels: levelResults[f]!,
      wrmsse: wrmsse(levelResults[f]!.map((l) => l.score)),
    }));
    if (opts.record ?? true) {
      for (const s of sources) {
        await tx.query(
          `INSERT INTO eval_scores (cutoff, horizon, weight_days, source, file_sha256, wrmsse, levels)
           VALUES ($1, $2, $3, $4, $5, $6, $7)`,
          [
            cutoff,
            horizon,
            weightDays,
            s === sources[0] && source ? source.path : s.source,
            s === sources[0] && source ? source.sha256 : null,
            Number.isNaN(s.wrmsse) ? null : s.wrmsse,
            JSON.stringify(s.levels.map((l) => ({ ...l, score: Number.isNaN(l.score) ? null : l.score }))),
          ],
        );
      }
    }
    return { cutoff, horizon, weightDays, materialized: !fresh, sources, series, problems };
  });
}

async function storedProblems(tx: DbSession, cutoff: string, weightDays: number): Promise<string[]> {
  const r = (
    await tx.query<{ no_sale_series: number; no_hierarchy_series: number; total_dollars: number }>(
      `SELECT no_sale_series, no_hierarchy_series, total_dollars FROM eval_materializations
       WHERE cutoff = $1 AND weight_days = $2`,
      [cutoff, weightDays],
    )
  ).rows[0]!;
  const out: string[] = [];
  if (r.no_sale_series > 0)
    out.push(`${r.no_sale_series} series have no sale on or before ${cutoff}: no scale, not evaluated`);
  if (r.no_hierarchy_series > 0) {
    out.push(
      `${r.no_hierarchy_series} series lack an item or store with department, category and region: not evaluated`,
    );
  }
  if (!(r.total_dollars > 0)) {
    out.push(`dollar sales over the ${weightDays} days up to ${cutoff} are zero at every level: no WRMSSE`);
  }
  return out;
}

async function setHorizon(tx: DbSession, set: string, cutoff: string): Promise<number> {
  const r = await tx.query<{ horizon: number }>(
    'SELECT horizon FROM snapshots WHERE set_name = $1 AND cutoff = $2',
    [set, cutoff],
  );
  if (!r.rows[0])
    throw new UsageError(`no snapshot of set '${set}' at cutoff ${cutoff}: build it, or give --horizon`);
  return r.rows[0].horizon;
}

/** The evaluated bottom series (a sale on or before the cutoff), ordered by key. */
async function evaluatedBottom(tx: DbSession, cutoff: string): Promise<BottomSeries[]> {
  const r = await tx.query<{
    series_id: number;
    item_id: string;
    store_id: string;
    dept_id: string;
    category_id: string;
    region_id: string;
  }>(
    `SELECT e.series_id, e.item_id, e.store_id, i.dept_id, i.category_id, st.region_id
     FROM eval_scales e JOIN items i ON i.item_id = e.item_id JOIN stores st ON st.store_id = e.store_id
     WHERE e.cutoff = $1 AND e.level = 12 AND e.status <> 'no_sale' ORDER BY e.key`,
    [cutoff],
  );
  return r.rows.map((x) => ({ seriesId: x.series_id, ...x }));
}

/**
 * Units of the evaluated series for `days` days from `first` (missing rows are 0), streamed in
 * binary. A lateral read per series walks the sales primary key (series_id, day) instead of
 * scanning every day of the chain's history.
 */
async function dailyMatrix(
  tx: DbSession,
  cutoff: string,
  ids: Int32Array,
  first: number,
  days: number,
): Promise<{ values: Float64Array; lastDay: number }> {
  const pos = new Map<number, number>();
  for (let i = 0; i < ids.length; i++) pos.set(ids[i]!, i);
  const values = new Float64Array(ids.length * days);
  // Days come from formatDay (digits and hyphens only), so they are safe as literals in COPY.
  const from = formatDay(first);
  const to = formatDay(first + days - 1);
  const sql = `COPY (SELECT e.series_id, x.day, x.units FROM eval_scales e
    CROSS JOIN LATERAL (SELECT day, units FROM sales WHERE series_id = e.series_id AND day BETWEEN DATE '${from}' AND DATE '${to}') x
    WHERE e.cutoff = DATE '${cutoff}' AND e.level = 12 AND e.status <> 'no_sale') TO STDOUT (FORMAT binary)`;
  let lastDay = Number.NEGATIVE_INFINITY;
  for await (const b of readCopyBinary(tx.copyTo(sql), ['int4', 'date', 'int4'])) {
    const sid = b.columns[0] as Int32Array;
    const day = b.columns[1] as Int32Array;
    const units = b.columns[2] as Int32Array;
    for (let r = 0; r < b.length; r++) {
      const i = pos.get(sid[r]!);
      if (i === undefined) continue;
      values[i * days + day[r]! - first] = units[r]!;
      if (day[r]! > lastDay) lastDay = day[r]!;
    }
  }
  return { values, lastDay };
}
