import { formatDay } from '../core/days.js';
import type { DbSession } from '../db/database.js';
import type { FindingColumn } from './check-definition.js';
import type { FindingCode, FindingDraft, Severity } from './finding.js';

/** Findings per INSERT: one statement per batch, each a set-based unnest. */
const BATCH = 5000;

const day = (d: number | null | undefined) => (d === null || d === undefined ? null : formatDay(d));
const num = (v: number | null | undefined) =>
  v === null || v === undefined || !Number.isFinite(v) ? null : v;

/**
 * Stores drafts as findings of one check in a run. Item, store and region come from the series
 * (and the store's region) when the draft leaves them out.
 */
export async function writeFindings(
  db: DbSession,
  runId: number,
  check: string,
  severityOf: (code: FindingCode) => Severity,
  drafts: Iterable<FindingDraft>,
): Promise<number> {
  let written = 0;
  let batch: FindingDraft[] = [];
  const flush = async () => {
    if (batch.length === 0) return;
    const cols = {
      code: [] as string[],
      severity: [] as string[],
      series: [] as Array<number | null>,
      item: [] as Array<string | null>,
      store: [] as Array<string | null>,
      region: [] as Array<string | null>,
      first: [] as Array<string | null>,
      last: [] as Array<string | null>,
      week: [] as Array<string | null>,
      detectable: [] as Array<string | null>,
      observed: [] as Array<number | null>,
      threshold: [] as Array<number | null>,
      rank: [] as Array<number | null>,
      message: [] as string[],
      details: [] as string[],
    };
    for (const f of batch) {
      cols.code.push(f.code);
      cols.severity.push(f.severity ?? severityOf(f.code));
      cols.series.push(f.seriesId ?? null);
      cols.item.push(f.itemId ?? null);
      cols.store.push(f.storeId ?? null);
      cols.region.push(f.regionId ?? null);
      cols.first.push(day(f.firstDay));
      cols.last.push(day(f.lastDay));
      cols.week.push(day(f.weekStart));
      cols.detectable.push(day(f.detectableDay));
      cols.observed.push(num(f.observed));
      cols.threshold.push(num(f.threshold));
      cols.rank.push(num(f.rank));
      cols.message.push(f.message);
      cols.details.push(JSON.stringify(f.details));
    }
    const res = await db.query(
      `INSERT INTO findings (run_id, "check", code, severity, series_id, item_id, store_id, region_id,
         first_day, last_day, week_start, detectable_day, observed, threshold, rank, message, details)
       SELECT $1, $2, f.code, f.severity, f.series_id, coalesce(f.item_id, s.item_id), coalesce(f.store_id, s.store_id),
         coalesce(f.region_id, st.region_id), f.first_day, f.last_day, f.week_start, f.detectable_day,
         f.observed, f.threshold, f.rank, f.message, f.details::jsonb
       FROM unnest($3::text[], $4::text[], $5::int4[], $6::text[], $7::text[], $8::text[], $9::date[], $10::date[],
                   $11::date[], $12::date[], $13::float8[], $14::float8[], $15::float8[], $16::text[], $17::text[])
            WITH ORDINALITY AS f(code, severity, series_id, item_id, store_id, region_id, first_day, last_day,
                                 week_start, detectable_day, observed, threshold, rank, message, details, ord)
       LEFT JOIN series s ON s.series_id = f.series_id
       LEFT JOIN stores st ON st.store_id = coalesce(f.store_id, s.store_id)
       ORDER BY f.ord`,
      [
        runId,
        check,
        cols.code,
        cols.severity,
        cols.series,
        cols.item,
        cols.store,
        cols.region,
        cols.first,
        cols.last,
        cols.week,
        cols.detectable,
        cols.observed,
        cols.threshold,
        cols.rank,
        cols.message,
        cols.details,
      ],
    );
    written += res.rowCount;
    batch = [];
  };
  for (const d of drafts) {
    batch.push(d);
    if (batch.length >= BATCH) await flush();
  }
  await flush();
  return written;
}

/**
 * Stores the rows of a check's SELECT as findings of `code`. Missing item, store and region
 * columns are derived from series_id and the store, as `writeFindings` does.
 */
export async function insertFindingsFrom(
  db: DbSession,
  runId: number,
  check: string,
  code: FindingCode,
  severity: Severity,
  columns: readonly FindingColumn[],
  select: string,
  params: readonly unknown[] = [],
): Promise<number> {
  const has = (c: FindingColumn) => columns.includes(c);
  const n = params.length;
  const target = ['run_id', '"check"', 'code', 'severity'];
  const values = [`$${n + 1}::int8`, `$${n + 2}::text`, `$${n + 3}::text`, `$${n + 4}::text`];
  const joins: string[] = [];
  const seriesJoin = has('series_id');
  if (seriesJoin) joins.push('LEFT JOIN series s ON s.series_id = f.series_id');
  const storeExpr = has('store_id')
    ? seriesJoin
      ? 'coalesce(f.store_id, s.store_id)'
      : 'f.store_id'
    : seriesJoin
      ? 's.store_id'
      : null;
  if (storeExpr && !has('region_id')) joins.push(`LEFT JOIN stores st ON st.store_id = ${storeExpr}`);
  const derived: Partial<Record<FindingColumn, string | null>> = {
    item_id: has('item_id')
      ? seriesJoin
        ? 'coalesce(f.item_id, s.item_id)'
        : 'f.item_id'
      : seriesJoin
        ? 's.item_id'
        : null,
    store_id: storeExpr,
    region_id: has('region_id') ? 'f.region_id' : storeExpr ? 'st.region_id' : null,
  };
  const all: FindingColumn[] = [
    'series_id',
    'item_id',
    'store_id',
    'region_id',
    'first_day',
    'last_day',
    'week_start',
    'detectable_day',
    'observed',
    'threshold',
    'rank',
    'message',
    'details',
  ];
  for (const c of all) {
    const expr = c in derived ? derived[c] : has(c) ? `f.${c}` : null;
    if (expr === null || expr === undefined) continue;
    target.push(c);
    values.push(expr);
  }
  const sql = `INSERT INTO findings (${target.join(', ')})
    SELECT ${values.join(', ')} FROM (${select}) AS f(${columns.join(', ')}) ${joins.join(' ')}`;
  const res = await db.query(sql, [...params, runId, check, code, severity]);
  return res.rowCount;
}
