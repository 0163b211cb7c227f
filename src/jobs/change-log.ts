import { formatDay, parseDay } from '../core/days.js';
import type { DbSession } from '../db/database.js';

/**
 * The change log of the raw tables (sql/000007.sql) and the marks that tie a snapshot to it: an
 * incremental run asks "has anything inside the previous snapshot's boundaries changed since it
 * was built?" here, in one indexed read, instead of rescanning 57M sales rows.
 */
export interface ChangeMark {
  /** Highest change id visible when the mark was read (0: none). */
  readonly last: number;
  /** Number of changes visible then: a change that took a lower id but committed later shows here. */
  readonly count: number;
}

/** One logged change. Days are epoch days; null = not known (a write outside the loader). */
export interface DataChange {
  readonly changeId: number;
  readonly table: string;
  readonly firstDay: number | null;
  readonly lastDay: number | null;
  readonly batchId: number | null;
}

type Query = Pick<DbSession, 'query'>;

/** Where the change log stands now. Read before a fingerprint, so the fingerprint has at least these. */
export async function readChangeMark(db: Query): Promise<ChangeMark> {
  const r = (
    await db.query<{ last: string; n: string }>(
      'SELECT coalesce(max(change_id), 0)::int8 AS last, count(*)::int8 AS n FROM data_changes',
    )
  ).rows[0]!;
  return { last: Number(r.last), count: Number(r.n) };
}

/**
 * Changes made after `mark`, or null when that cannot be told: a change with an id at or below
 * the mark committed after the mark was read (the counts differ).
 */
export async function changesSince(db: Query, mark: ChangeMark): Promise<DataChange[] | null> {
  const r = await db.query<{
    change_id: string;
    table_name: string;
    first_day: string | null;
    last_day: string | null;
    batch_id: string | null;
    before: string;
  }>(
    `SELECT c.change_id, c.table_name, c.first_day, c.last_day, c.batch_id, b.n AS before
     FROM (SELECT count(*)::int8 AS n FROM data_changes WHERE change_id <= $1) b
     LEFT JOIN data_changes c ON c.change_id > $1
     ORDER BY c.change_id`,
    [mark.last],
  );
  if (Number(r.rows[0]?.before ?? 0) !== mark.count) return null;
  return r.rows
    .filter((x) => x.change_id !== null)
    .map((x) => ({
      changeId: Number(x.change_id),
      table: x.table_name,
      firstDay: x.first_day === null ? null : parseDay(x.first_day),
      lastDay: x.last_day === null ? null : parseDay(x.last_day),
      batchId: x.batch_id === null ? null : Number(x.batch_id),
    }));
}

/** The boundaries of a snapshot's data: sales up to the cutoff, prices of weeks up to the price boundary. */
export interface DataBoundaries {
  readonly cutoff: number;
  readonly priceBoundary: number;
}

/**
 * Why `changes` may touch data inside `b`, or null when every one lies past it: sales only on
 * days after the cutoff, prices only for weeks after the price boundary. Anything else (the
 * hierarchy, the calendar, events, a write outside the loader) may change any cell.
 */
export function changeInside(changes: readonly DataChange[], b: DataBoundaries): string | null {
  for (const c of changes) {
    const by = c.batchId === null ? '' : ` (load batch ${c.batchId})`;
    if (c.table !== 'sales' && c.table !== 'prices') return `${c.table} changed${by}`;
    if (c.firstDay === null) return `${c.table} changed outside the loader`;
    const limit = c.table === 'sales' ? b.cutoff : b.priceBoundary;
    if (c.firstDay <= limit) {
      const what = c.table === 'sales' ? 'sales of' : 'prices of the week of';
      return `${what} ${formatDay(c.firstDay)} changed${by}, on or before ${formatDay(limit)}`;
    }
  }
  return null;
}

/** A snapshot's mark, with the boundaries its fingerprint covers. */
export interface SnapshotMark extends DataBoundaries {
  readonly mark: ChangeMark;
}

/** Records where the change log stood when `snapshotId`'s fingerprint was taken. */
export async function recordSnapshotMark(db: Query, snapshotId: number, m: SnapshotMark): Promise<void> {
  await db.query(
    `INSERT INTO snapshot_marks (snapshot_id, change_last, change_count, cutoff, price_boundary)
     VALUES ($1, $2, $3, $4::date, $5::date)
     ON CONFLICT (snapshot_id) DO UPDATE SET change_last = EXCLUDED.change_last,
       change_count = EXCLUDED.change_count, cutoff = EXCLUDED.cutoff,
       price_boundary = EXCLUDED.price_boundary, recorded_at = now()`,
    [snapshotId, m.mark.last, m.mark.count, formatDay(m.cutoff), formatDay(m.priceBoundary)],
  );
  // Marks of snapshots that were rebuilt, refreshed or removed (ids are never reused).
  await db.query(
    'DELETE FROM snapshot_marks m WHERE NOT EXISTS (SELECT 1 FROM snapshots s WHERE s.snapshot_id = m.snapshot_id)',
  );
}

/** The mark of a snapshot, or null when none was recorded (a snapshot built outside the runner). */
export async function snapshotMark(db: Query, snapshotId: number): Promise<SnapshotMark | null> {
  const r = (
    await db.query<{ last: string; n: string; cutoff: string; pb: string }>(
      `SELECT change_last AS last, change_count AS n, cutoff, price_boundary AS pb
       FROM snapshot_marks WHERE snapshot_id = $1`,
      [snapshotId],
    )
  ).rows[0];
  if (!r) return null;
  return {
    mark: { last: Number(r.last), count: Number(r.n) },
    cutoff: parseDay(r.cutoff)!,
    priceBoundary: parseDay(r.pb)!,
  };
}
