import { day as parseDayStrict } from '../../core/days.js';
import type { DbSession } from '../../db/database.js';
import type { Finding, Severity } from '../finding.js';
import { readFindings } from '../read-findings.js';
import { CHECK_NAMES, findCheck } from '../registry.js';
import type { CheckStatus, CheckSummary } from '../run-checks.js';

/** Everything the HTML report shows, read from a stored check run (no recomputation). */
export interface ReportData {
  readonly run: {
    readonly runId: number;
    readonly startedAt: string;
    readonly finishedAt: string | null;
    readonly cutoff: string | null;
    readonly scheduled: boolean;
    readonly status: string;
    readonly blocking: number;
    readonly warnings: number;
    readonly infos: number;
    readonly waived: number;
    readonly firstDay: string | null;
    readonly lastDay: string | null;
    readonly salesRows: number | null;
    readonly seriesSeen: number | null;
  };
  readonly checks: ReadonlyArray<
    CheckSummary & {
      readonly codes: ReadonlyArray<{ code: string; severity: Severity; meaning: string; count: number }>;
    }
  >;
  /** Chain-wide units per day (epoch day of index 0), or null when no check read sales. */
  readonly daily: { readonly firstDay: number; readonly units: Float64Array } | null;
  /** Findings about the whole chain on given days (volume drops, calendar gaps). */
  readonly chainFindings: readonly Finding[];
  /** The worst findings, for the findings table. */
  readonly findings: readonly Finding[];
  readonly totalFindings: number;
  readonly series: readonly ReportSeries[];
}

export interface ReportSeries {
  readonly seriesId: number;
  readonly itemId: string;
  readonly storeId: string;
  readonly firstDay: number;
  /** Dense daily units from firstDay; NaN where no row. */
  readonly units: Float64Array;
  readonly priceWeeks: readonly number[];
  readonly prices: readonly number[];
  readonly findings: readonly Finding[];
}

export interface CollectOptions {
  /** How many flagged series get their own chart (default: the 20 worst). */
  readonly worstSeries?: number;
  /** Rows in the findings table. */
  readonly tableRows?: number;
}

/** Reads a finished check run into report data. */
export async function collectReport(
  db: DbSession,
  runId: number,
  opts: CollectOptions = {},
): Promise<ReportData> {
  const runRes = await db.query<Record<string, unknown>>('SELECT * FROM check_runs WHERE run_id = $1', [
    runId,
  ]);
  const r = runRes.rows[0];
  if (!r) throw new Error(`check run ${runId} does not exist`);
  const iso = (v: unknown) =>
    v === null || v === undefined ? null : v instanceof Date ? v.toISOString() : String(v);
  const run: ReportData['run'] = {
    runId,
    startedAt: iso(r.started_at)!,
    finishedAt: iso(r.finished_at),
    cutoff: r.cutoff as string | null,
    scheduled: r.scheduled as boolean,
    status: r.status as string,
    blocking: r.blocking as number,
    warnings: r.warnings as number,
    infos: r.infos as number,
    waived: r.waived as number,
    firstDay: r.first_day as string | null,
    lastDay: r.last_day as string | null,
    salesRows: r.sales_rows as number | null,
    seriesSeen: r.series_seen as number | null,
  };

  const results = await db.query<{
    check: string;
    status: CheckStatus;
    blocking: number;
    warnings: number;
    infos: number;
    waived: number;
    elapsed_ms: number;
    error: string | null;
    params: { severity?: Severity | Record<string, Severity> } | null;
  }>('SELECT * FROM check_results WHERE run_id = $1', [runId]);
  const codeCounts = await db.query<{ check: string; code: string; n: number }>(
    'SELECT "check", code, count(*)::int AS n FROM findings WHERE run_id = $1 GROUP BY 1, 2',
    [runId],
  );
  const count = (check: string, code: string) =>
    codeCounts.rows.find((x) => x.check === check && x.code === code)?.n ?? 0;
  const checks = results.rows.map((c) => {
    const def = findCheck(c.check);
    const sev = c.params?.severity;
    const codes = Object.entries(def?.codes ?? {}).map(([code, info]) => ({
      code,
      severity: (typeof sev === 'string' ? sev : (sev?.[code] ?? info!.severity)) as Severity,
      meaning: info!.meaning,
      count: count(c.check, code),
    }));
    return {
      check: c.check,
      description: def?.description ?? '',
      status: c.status,
      blocking: c.blocking,
      warnings: c.warnings,
      infos: c.infos,
      waived: c.waived,
      elapsedMs: c.elapsed_ms,
      error: c.error,
      codes,
    };
  });
  // Registry order, so every report lists the checks the same way.
  checks.sort((a, b) => CHECK_NAMES.indexOf(a.check) - CHECK_NAMES.indexOf(b.check));

  const dayRes = await db.query<{ day: string; units: number }>(
    'SELECT day, units FROM check_run_days WHERE run_id = $1 ORDER BY day',
    [runId],
  );
  let daily: ReportData['daily'] = null;
  if (dayRes.rows.length) {
    const first = parseDayStrict(dayRes.rows[0]!.day);
    const last = parseDayStrict(dayRes.rows[dayRes.rows.length - 1]!.day);
    const units = new Float64Array(last - first + 1).fill(Number.NaN);
    for (const d of dayRes.rows) units[parseDayStrict(d.day) - first] = d.units;
    daily = { firstDay: first, units };
  }

  const total = await db.query<{ n: number }>('SELECT count(*)::int AS n FROM findings WHERE run_id = $1', [
    runId,
  ]);
  const findings = await readFindings(db, runId, { limit: opts.tableRows ?? 500 });
  const chainFindings = await readFindings(db, runId, { chainDays: true, limit: 2000 });

  const worst = await db.query<{ series_id: number; item_id: string; store_id: string }>(
    `SELECT series_id, min(item_id) AS item_id, min(store_id) AS store_id
     FROM findings WHERE run_id = $1 AND series_id IS NOT NULL AND severity <> 'info'
     GROUP BY series_id
     ORDER BY bool_and(waived_by IS NOT NULL), min(CASE severity WHEN 'block' THEN 0 WHEN 'warn' THEN 1 ELSE 2 END),
              count(*) DESC, max(rank) DESC NULLS LAST, series_id
     LIMIT $2`,
    [runId, opts.worstSeries ?? 20],
  );
  const ids = worst.rows.map((w) => w.series_id);
  const series: ReportSeries[] = [];
  if (ids.length) {
    const until = run.cutoff ?? run.lastDay ?? '9999-12-31';
    const sales = await db.query<{ series_id: number; day: string; units: number }>(
      'SELECT series_id, day, units FROM sales WHERE series_id = ANY($1::int4[]) AND day <= $2 ORDER BY series_id, day',
      [ids, until],
    );
    const prices = await db.query<{ series_id: number; week_start: string; price: number }>(
      `SELECT s.series_id, p.week_start, p.price::float8 AS price FROM prices p JOIN series s USING (item_id, store_id)
       WHERE s.series_id = ANY($1::int4[]) AND p.week_start <= $2 ORDER BY 1, 2`,
      [ids, until],
    );
    const all = await readFindings(db, runId, { seriesIds: ids });
    for (const w of worst.rows) {
      const rows = sales.rows.filter((x) => x.series_id === w.series_id);
      if (rows.length === 0) continue;
      const first = parseDayStrict(rows[0]!.day);
      const last = parseDayStrict(rows[rows.length - 1]!.day);
      const units = new Float64Array(last - first + 1).fill(Number.NaN);
      for (const x of rows) units[parseDayStrict(x.day) - first] = x.units;
      const pr = prices.rows.filter((x) => x.series_id === w.series_id);
      series.push({
        seriesId: w.series_id,
        itemId: w.item_id,
        storeId: w.store_id,
        firstDay: first,
        units,
        priceWeeks: pr.map((x) => parseDayStrict(x.week_start)),
        prices: pr.map((x) => x.price),
        findings: all.filter((f) => f.seriesId === w.series_id),
      });
    }
  }
  return { run, checks, daily, chainFindings, findings, totalFindings: total.rows[0]?.n ?? 0, series };
}
