import type { DbSession } from '../db/database.js';
import type { Finding, Severity } from './finding.js';

interface FindingRow {
  finding_id: number;
  run_id: number;
  check: string;
  code: string;
  severity: Severity;
  series_id: number | null;
  item_id: string | null;
  store_id: string | null;
  region_id: string | null;
  first_day: string | null;
  last_day: string | null;
  week_start: string | null;
  detectable_day: string | null;
  observed: number | null;
  threshold: number | null;
  rank: number | null;
  message: string;
  details: unknown;
  waived_by: number | null;
}

function toFinding(r: FindingRow): Finding {
  return {
    findingId: r.finding_id,
    runId: r.run_id,
    check: r.check,
    code: r.code,
    severity: r.severity,
    seriesId: r.series_id,
    itemId: r.item_id,
    storeId: r.store_id,
    regionId: r.region_id,
    firstDay: r.first_day,
    lastDay: r.last_day,
    weekStart: r.week_start,
    detectableDay: r.detectable_day,
    observed: r.observed,
    threshold: r.threshold,
    rank: r.rank,
    message: r.message,
    details: (r.details ?? {}) as never,
    waivedBy: r.waived_by,
  } as Finding;
}

/** Worst first: unwaived before waived, block before warn before info, then by rank within a check. */
export const FINDING_ORDER = `(waived_by IS NOT NULL), CASE severity WHEN 'block' THEN 0 WHEN 'warn' THEN 1 ELSE 2 END,
  "check", rank DESC NULLS LAST, finding_id`;

export interface ReadFindingsOptions {
  readonly check?: string;
  /** Only findings of these series. */
  readonly seriesIds?: readonly number[];
  /** Only chain-wide findings on given days (no series, item or store). */
  readonly chainDays?: boolean;
  readonly severity?: Severity;
  readonly limit?: number;
  readonly offset?: number;
}

/** Findings of a run, worst first, optionally filtered and paged. */
export async function readFindings(
  db: DbSession,
  runId: number,
  opts: ReadFindingsOptions = {},
): Promise<Finding[]> {
  const params: unknown[] = [runId];
  let where = 'run_id = $1';
  if (opts.check) {
    params.push(opts.check);
    where += ` AND "check" = $${params.length}`;
  }
  if (opts.seriesIds) {
    params.push(opts.seriesIds);
    where += ` AND series_id = ANY($${params.length}::int4[])`;
  }
  if (opts.chainDays)
    where += ' AND series_id IS NULL AND item_id IS NULL AND store_id IS NULL AND first_day IS NOT NULL';
  if (opts.severity) {
    params.push(opts.severity);
    where += ` AND severity = $${params.length}`;
  }
  let page = '';
  if (opts.limit !== undefined) {
    params.push(opts.limit);
    page += ` LIMIT $${params.length}`;
  }
  if (opts.offset !== undefined) {
    params.push(opts.offset);
    page += ` OFFSET $${params.length}`;
  }
  const res = await db.query<FindingRow>(
    `SELECT * FROM findings WHERE ${where} ORDER BY ${FINDING_ORDER}${page}`,
    params,
  );
  return res.rows.map(toFinding);
}

/** The newest finished check run, or null when none has finished. */
export async function latestRunId(db: DbSession): Promise<number | null> {
  const res = await db.query<{ run_id: number }>(
    `SELECT run_id FROM check_runs WHERE finished_at IS NOT NULL ORDER BY run_id DESC LIMIT 1`,
  );
  return res.rows[0]?.run_id ?? null;
}
