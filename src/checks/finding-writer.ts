import { formatDay } from '../core/days.js';
import { CopyBinaryWriter } from '../db/binary-copy.js';
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

/** Item, store and region of each series, and each store's region, for findings written by COPY. */
export interface FindingKeys {
  readonly series: ReadonlyMap<number, { readonly itemId: string; readonly storeId: string }>;
  readonly regionOf: ReadonlyMap<string, string | null>;
}

/** Loads the keys `FindingSink` fills in (two small tables: tens of thousands of series at most). */
export async function loadFindingKeys(db: DbSession): Promise<FindingKeys> {
  const [series, stores] = await Promise.all([
    db.query<{ series_id: number; item_id: string; store_id: string }>(
      'SELECT series_id, item_id, store_id FROM series',
    ),
    db.query<{ store_id: string; region_id: string | null }>('SELECT store_id, region_id FROM stores'),
  ]);
  return {
    series: new Map(series.rows.map((r) => [r.series_id, { itemId: r.item_id, storeId: r.store_id }])),
    regionOf: new Map(stores.rows.map((r) => [r.store_id, r.region_id])),
  };
}

const FINDING_COPY_SQL = `COPY findings (run_id, "check", code, severity, series_id, item_id, store_id, region_id,
  first_day, last_day, week_start, detectable_day, observed, threshold, rank, message, details)
  FROM STDIN (FORMAT binary)`;
const SEVERITIES: ReadonlySet<string> = new Set(['block', 'warn', 'info']);

/**
 * Every finding a run's checks write, as rows of one binary COPY into `findings` at `close`
 * (instead of an INSERT with joins per check and batch). Rows are encoded as checks hand them
 * over; item, store and region are filled from the series and the store's region as
 * `writeFindings` does, from `keys` loaded once. The COPY runs when the checks are done rather
 * than streaming beside them, so it never holds one of the pool's connections while the passes
 * and the set-based checks need them (checks hand over most findings at the end anyway).
 */
export class FindingSink {
  private readonly writer = new CopyBinaryWriter();
  private readonly chunks: Uint8Array[] = [];
  private closed = false;
  private written = 0;

  constructor(
    private readonly db: DbSession,
    private readonly runId: number,
    private readonly keys: Promise<FindingKeys>,
  ) {
    // Awaited by `add`; a failure before the first write must not go unhandled.
    keys.catch(() => {});
  }

  /**
   * Encodes the drafts of one check as findings (synchronously, so one check's rows stay
   * together in its own order). A draft that cannot be stored throws before any row of the
   * batch is encoded, so the check fails instead of the whole COPY.
   */
  async add(
    check: string,
    severityOf: (code: FindingCode) => Severity,
    drafts: Iterable<FindingDraft>,
  ): Promise<number> {
    const keys = await this.keys;
    if (this.closed) throw new Error('findings written after the run closed its findings');
    const list = Array.isArray(drafts) ? (drafts as FindingDraft[]) : [...drafts];
    const severities = list.map((f) => {
      const s = f.severity ?? severityOf(f.code);
      if (!SEVERITIES.has(s))
        throw new Error(`finding ${f.code}: severity '${s}' is not block, warn or info`);
      if (typeof f.message !== 'string') throw new Error(`finding ${f.code}: no message`);
      return s;
    });
    const w = this.writer;
    const text = (v: string | null | undefined) => (v === null || v === undefined ? w.null() : w.text(v));
    const date = (d: number | null | undefined) => (d === null || d === undefined ? w.null() : w.date(d));
    const float = (v: number | null | undefined) =>
      v === null || v === undefined || !Number.isFinite(v) ? w.null() : w.float8(v);
    for (let i = 0; i < list.length; i++) {
      const f = list[i]!;
      const series =
        f.seriesId === null || f.seriesId === undefined ? undefined : keys.series.get(f.seriesId);
      const storeId = f.storeId ?? series?.storeId ?? null;
      const regionId = f.regionId ?? (storeId === null ? null : (keys.regionOf.get(storeId) ?? null));
      w.row(17);
      w.int8(this.runId);
      w.text(check);
      w.text(f.code);
      w.text(severities[i]!);
      if (f.seriesId === null || f.seriesId === undefined) w.null();
      else w.int4(f.seriesId);
      text(f.itemId ?? series?.itemId);
      text(storeId);
      text(regionId);
      date(f.firstDay);
      date(f.lastDay);
      date(f.weekStart);
      date(f.detectableDay);
      float(f.observed);
      float(f.threshold);
      float(f.rank);
      w.text(f.message);
      const details = JSON.stringify(f.details);
      // Binary jsonb is a version byte (1) followed by the JSON text.
      text(details === undefined ? null : `\u0001${details}`);
    }
    this.chunks.push(...w.take());
    this.written += list.length;
    return list.length;
  }

  /** Stores every finding added (one COPY); resolves with how many rows were stored. */
  async close(): Promise<number> {
    if (this.closed) throw new Error('the run closed its findings twice');
    this.closed = true;
    if (this.written === 0) return 0;
    this.chunks.push(...this.writer.end());
    return this.db.copyFrom(FINDING_COPY_SQL, this.chunks);
  }
}
