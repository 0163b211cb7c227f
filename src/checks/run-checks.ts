import { type Config, WEEKDAYS } from '../config/config.js';
import { formatDay, parseDay } from '../core/days.js';
import type { Db } from '../db/database.js';
import { ConfigError, UsageError } from '../db/errors.js';
import type { AnyCheck, CheckContext, CommonParams, PassName } from './check-definition.js';
import type { FindingCode, Finding, Severity } from './finding.js';
import { FindingSink, insertFindingsFrom, loadFindingKeys, writeFindings } from './finding-writer.js';
import { type PricePassResult, type PriceVisitor, runPricePass } from './price-pass.js';
import { readFindings } from './read-findings.js';
import { CHECK_NAMES, CHECKS } from './registry.js';
import { runSalesPass, type SalesPassResult, type SalesSource, type SeriesVisitor } from './sales-pass.js';
import { SharedPass } from './shared-pass.js';
import { applyWaivers } from './waivers.js';

export interface RunChecksOptions {
  /** Last day of data considered (YYYY-MM-DD); everything stored when absent. */
  readonly cutoff?: string | undefined;
  /** Check names to run (even if disabled in the config); every enabled check when absent. */
  readonly only?: readonly string[] | undefined;
  /** A scheduled refresh (the job runner): stale data blocks. */
  readonly scheduled?: boolean | undefined;
  /** The run's day (YYYY-MM-DD) for freshness and waiver expiry; today in UTC by default. */
  readonly today?: string | undefined;
  /**
   * Store the copies of the sales and prices read (sales-blocks.ts, price-history.ts) so that
   * later runs read only newer days from the raw tables. Valid copies are read either way; the
   * job runner's check step keeps them (it checks growing data night after night), an ad-hoc
   * run does not pay for writing them unless asked.
   */
  readonly keepCopies?: boolean | undefined;
  /**
   * With `keepCopies`: keep each series' newest days in this process as well (recent-sales.ts),
   * for a build that follows in the same process (the job runner's).
   */
  readonly keepRecent?: boolean | undefined;
  /**
   * Which findings `findings` holds: every one (default), or only the blocking ones (the job
   * runner's gate, which prints a few of them: a chain's run has tens of thousands of warnings,
   * and reading them all back took the server 0.1 s a night on the 57M-row chain, before this
   * process decoded them).
   */
  readonly readBack?: 'all' | 'blocking' | undefined;
}

export type CheckStatus = 'passed' | 'warned' | 'blocked' | 'failed';

export interface CheckSummary {
  readonly check: string;
  readonly description: string;
  readonly status: CheckStatus;
  readonly blocking: number;
  readonly warnings: number;
  readonly infos: number;
  readonly waived: number;
  readonly elapsedMs: number;
  readonly error: string | null;
}

export interface CheckRunResult {
  readonly runId: number;
  readonly status: 'passed' | 'blocked' | 'failed';
  readonly cutoff: string | null;
  /** Unwaived blocking findings (a check that failed to run counts as one). */
  readonly blocking: number;
  readonly warnings: number;
  readonly infos: number;
  readonly waived: number;
  readonly checks: readonly CheckSummary[];
  /** Every finding of the run (or every blocking one: `readBack`), worst first; `readFindings` pages them for large runs. */
  readonly findings: readonly Finding[];
  /** Where the sales pass read its rows (null: no check read sales). */
  readonly salesSource: SalesSource | null;
  /** Where the prices pass read its rows (null: no check read prices). */
  readonly pricesSource: PricePassResult['source'] | null;
}

/** The retail week's first day (epoch day) for `day`, weeks starting on `weekStartsOn` (0 = Sunday). */
export function retailWeekStart(day: number, weekStartsOn: number): number {
  const dow = (((day + 4) % 7) + 7) % 7; // 1970-01-01 was a Thursday (4)
  return day - ((dow - weekStartsOn + 7) % 7);
}

function selectChecks(config: Config, only: readonly string[] | undefined): AnyCheck[] {
  if (!only) return CHECKS.filter((c) => paramsOf(config, c).enabled);
  const unknown = only.filter((n) => !CHECK_NAMES.includes(n));
  if (unknown.length) {
    throw new UsageError(
      `unknown check ${unknown.map((n) => `'${n}'`).join(', ')} (known: ${CHECK_NAMES.join(', ')})`,
    );
  }
  return CHECKS.filter((c) => only.includes(c.name));
}

function paramsOf(config: Config, c: AnyCheck): CommonParams {
  const raw = (config.checks as Record<string, unknown> | undefined)?.[c.name] ?? {};
  const parsed = c.params.safeParse(raw);
  if (!parsed.success) {
    const lines = parsed.error.issues.map((i) => `  checks.${[c.name, ...i.path].join('.')}: ${i.message}`);
    throw new ConfigError(`invalid configuration:\n${lines.join('\n')}`);
  }
  return parsed.data;
}

function severityResolver(c: AnyCheck, p: CommonParams) {
  return (code: FindingCode): Severity => {
    if (typeof p.severity === 'string') return p.severity;
    return p.severity?.[code] ?? c.codes[code]?.severity ?? 'block';
  };
}

/**
 * Runs the selected checks over the raw tables and stores their findings under a new check run.
 * Checks run concurrently; those reading sales or prices share one streaming pass of each
 * table. A check that throws is recorded as a blocking `check-failed` finding, so a broken check
 * never lets a build through.
 */
export async function runChecks(
  db: Db,
  config: Config,
  opts: RunChecksOptions = {},
): Promise<CheckRunResult> {
  const cutoff = opts.cutoff === undefined ? null : parseDay(opts.cutoff);
  if (opts.cutoff !== undefined && cutoff === null) {
    throw new UsageError(`--cutoff: '${opts.cutoff}' is not a valid day (YYYY-MM-DD)`);
  }
  const today = opts.today === undefined ? Math.floor(Date.now() / 86_400_000) : parseDay(opts.today);
  if (today === null) throw new UsageError(`today: '${opts.today}' is not a valid day (YYYY-MM-DD)`);
  const selected = selectChecks(config, opts.only);
  const params = new Map(selected.map((c) => [c.name, paramsOf(config, c)]));
  const weekStartsOn = WEEKDAYS.indexOf(config.calendar.weekStartsOn);
  const scheduled = opts.scheduled ?? false;

  const run = await db.query<{ run_id: number }>(
    'INSERT INTO check_runs (cutoff, "only", scheduled) VALUES ($1, $2, $3) RETURNING run_id',
    [cutoff === null ? null : formatDay(cutoff), opts.only ? [...opts.only] : null, scheduled],
  );
  const runId = run.rows[0]!.run_id;
  // One binary COPY stores every finding the checks write, once they are done.
  const sink = new FindingSink(db, runId, loadFindingKeys(db));
  const timings: Record<string, number> = {};
  const timed = async <T>(name: string, fn: () => Promise<T>) => {
    const t0 = performance.now();
    try {
      return await fn();
    } finally {
      timings[name] = Math.round(performance.now() - t0);
    }
  };

  const readers = (pass: PassName) => selected.filter((c) => c.reads.includes(pass)).length;
  let pricesResult: PricePassResult | undefined;
  const pricePass = new SharedPass<PriceVisitor, PricePassResult>(readers('prices'), async (v) => {
    pricesResult = await timed('pass:prices', () => runPricePass(db, cutoff, v, opts.keepCopies ?? false));
    return pricesResult;
  });
  let salesResult: SalesPassResult | undefined;
  // The two passes run side by side (checks that need both match them up afterwards).
  const salesPass = new SharedPass<SeriesVisitor, SalesPassResult>(readers('sales'), async (v) => {
    salesResult = await timed('pass:sales', () =>
      runSalesPass(
        db,
        cutoff,
        v,
        (d) => retailWeekStart(d, weekStartsOn),
        opts.keepCopies ?? false,
        (opts.keepCopies ?? false) && (opts.keepRecent ?? false),
      ),
    );
    return salesResult;
  });

  const outcomes = await Promise.all(
    selected.map(async (c) => {
      const p = params.get(c.name)!;
      const severity = severityResolver(c, p);
      const joined = new Set<PassName>();
      const join = (pass: PassName) => {
        if (!c.reads.includes(pass)) throw new Error(`check ${c.name} reads ${pass} without declaring it`);
        if (joined.has(pass)) throw new Error(`check ${c.name} joined the ${pass} pass twice`);
        joined.add(pass);
      };
      const ctx: CheckContext<CommonParams> = {
        runId,
        check: c.name,
        params: p,
        cutoff,
        scheduled,
        today,
        weekStartsOn,
        weekStart: (d) => retailWeekStart(d, weekStartsOn),
        severity,
        prices(visitor) {
          join('prices');
          return pricePass.subscribe(visitor);
        },
        sales(visitor) {
          join('sales');
          return salesPass.subscribe(visitor);
        },
        write: (drafts) => sink.add(c.name, severity, drafts),
        insertFrom: (code, columns, select, sqlParams) =>
          insertFindingsFrom(db, runId, c.name, code, severity(code), columns, select, sqlParams),
      };
      const t0 = performance.now();
      let error: string | null = null;
      try {
        await c.run(db, ctx);
      } catch (err) {
        error = (err as Error)?.message ?? String(err);
      } finally {
        for (const pass of c.reads) {
          if (joined.has(pass)) continue;
          (pass === 'prices' ? pricePass : salesPass).release();
        }
      }
      const elapsedMs = performance.now() - t0;
      timings[c.name] = Math.round(elapsedMs);
      return { check: c, elapsedMs, error, params: p };
    }),
  ).finally(() => sink.close());
  for (const o of outcomes) {
    if (o.error === null) continue;
    // Partial output of a failed check is dropped; the failure itself blocks.
    await db.query(`DELETE FROM findings WHERE run_id = $1 AND "check" = $2`, [runId, o.check.name]);
    await writeFindings(db, runId, o.check.name, () => 'block', [
      { code: 'check-failed', details: { error: o.error }, message: `the check could not run: ${o.error}` },
    ]);
  }

  if (salesResult && salesResult.daily.units.length > 0) {
    const d = salesResult.daily;
    const days = Array.from({ length: d.units.length }, (_, i) => formatDay(d.firstDay + i));
    await db.query(
      `INSERT INTO check_run_days (run_id, day, units, rows)
       SELECT $1, * FROM unnest($2::date[], $3::float8[], $4::int4[])`,
      [runId, days, Array.from(d.units), Array.from(d.rows)],
    );
  }
  const waived = await applyWaivers(db, runId, formatDay(today));
  // The run's findings are final now: read them back while the summary rows are written.
  const findings = readFindings(db, runId, opts.readBack === 'blocking' ? { severity: 'block' } : {});
  findings.catch(() => {}); // awaited below; a failure before then must not go unhandled
  const counts = await db.query<{
    check: string;
    blocking: number;
    warnings: number;
    infos: number;
    waived: number;
  }>(
    `SELECT "check",
       count(*) FILTER (WHERE severity = 'block' AND waived_by IS NULL)::int AS blocking,
       count(*) FILTER (WHERE severity = 'warn' AND waived_by IS NULL)::int AS warnings,
       count(*) FILTER (WHERE severity = 'info' AND waived_by IS NULL)::int AS infos,
       count(*) FILTER (WHERE waived_by IS NOT NULL)::int AS waived
     FROM findings WHERE run_id = $1 GROUP BY "check"`,
    [runId],
  );
  const byCheck = new Map(counts.rows.map((r) => [r.check, r]));
  const checks: CheckSummary[] = outcomes.map((o) => {
    const n = byCheck.get(o.check.name) ?? { blocking: 0, warnings: 0, infos: 0, waived: 0 };
    const status: CheckStatus = o.error
      ? 'failed'
      : n.blocking
        ? 'blocked'
        : n.warnings
          ? 'warned'
          : 'passed';
    return {
      check: o.check.name,
      description: o.check.description,
      status,
      blocking: n.blocking,
      warnings: n.warnings,
      infos: n.infos,
      waived: n.waived,
      elapsedMs: o.elapsedMs,
      error: o.error,
    };
  });
  await db.query(
    `INSERT INTO check_results (run_id, "check", status, blocking, warnings, infos, waived, elapsed_ms, params, error)
     SELECT $1, * FROM unnest($2::text[], $3::text[], $4::int4[], $5::int4[], $6::int4[], $7::int4[], $8::float8[], $9::jsonb[], $10::text[])`,
    [
      runId,
      checks.map((c) => c.check),
      checks.map((c) => c.status),
      checks.map((c) => c.blocking),
      checks.map((c) => c.warnings),
      checks.map((c) => c.infos),
      checks.map((c) => c.waived),
      checks.map((c) => c.elapsedMs),
      outcomes.map((o) => JSON.stringify(o.params)),
      checks.map((c) => c.error),
    ],
  );
  const sum = (k: 'blocking' | 'warnings' | 'infos' | 'waived') => checks.reduce((a, c) => a + c[k], 0);
  const status = checks.some((c) => c.error) ? 'failed' : sum('blocking') > 0 ? 'blocked' : 'passed';
  await db.query(
    `UPDATE check_runs SET finished_at = now(), status = $2, blocking = $3, warnings = $4, infos = $5, waived = $6,
       first_day = $7, last_day = $8, sales_rows = $9, series_seen = $10, timings = $11
     WHERE run_id = $1`,
    [
      runId,
      status,
      sum('blocking'),
      sum('warnings'),
      sum('infos'),
      waived,
      salesResult?.firstDay == null ? null : formatDay(salesResult.firstDay),
      salesResult?.lastDay == null ? null : formatDay(salesResult.lastDay),
      salesResult?.rows ?? null,
      salesResult?.series ?? null,
      JSON.stringify({
        ...timings,
        ...(salesResult ? { 'sales-source': salesResult.source } : {}),
        ...(pricesResult ? { 'prices-source': pricesResult.source } : {}),
      }),
    ],
  );
  return {
    runId,
    status,
    cutoff: cutoff === null ? null : formatDay(cutoff),
    blocking: sum('blocking'),
    warnings: sum('warnings'),
    infos: sum('infos'),
    waived: sum('waived'),
    checks,
    findings: await findings,
    salesSource: salesResult?.source ?? null,
    pricesSource: pricesResult?.source ?? null,
  };
}
