/**
 * Writes a load batch's outcome: its load_batches row and its rejects in rejected_rows (binary
 * COPY). For a rolled-back batch this runs after the rollback, in its own transaction, so the user
 * still sees why nothing was stored.
 */
import { formatDay } from '../core/days.js';
import { CopyBinaryWriter } from '../db/binary-copy.js';
import type { DbSession } from '../db/database.js';
import type { Layout, LoadMode, LoadTarget } from './targets.js';

/** A reject as stored and reported. */
export interface RejectRow {
  readonly line: number;
  readonly reason: string;
  readonly raw: string;
  readonly key?: string | undefined;
  readonly otherLine?: number | undefined;
}

export interface BatchOutcome {
  readonly target: LoadTarget;
  readonly file: string;
  readonly mode: LoadMode;
  readonly layout: Layout | null;
  readonly status: 'loaded' | 'rejected';
  readonly rowsRead: number;
  readonly rowsStored: number;
  readonly rowsRejected: number;
  readonly firstDay: number | null;
  readonly lastDay: number | null;
  readonly startedAt: Date;
  readonly message: string | null;
  readonly rejects: readonly RejectRow[];
}

/** Inserts the batch row and its rejects; returns the batch id. */
export async function recordBatch(tx: DbSession, b: BatchOutcome): Promise<number> {
  const res = await tx.query<{ batch_id: number }>(
    `INSERT INTO load_batches (target, file, mode, layout, status, rows_read, rows_stored, rows_rejected,
       first_day, last_day, started_at, finished_at, message)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9::date, $10::date, $11, clock_timestamp(), $12) RETURNING batch_id`,
    [
      b.target,
      b.file,
      b.mode,
      b.layout,
      b.status,
      b.rowsRead,
      b.rowsStored,
      b.rowsRejected,
      b.firstDay === null ? null : formatDay(b.firstDay),
      b.lastDay === null ? null : formatDay(b.lastDay),
      b.startedAt.toISOString(),
      b.message,
    ],
  );
  const batchId = Number(res.rows[0]!.batch_id);
  if (b.rejects.length > 0) {
    const w = new CopyBinaryWriter();
    for (const r of b.rejects) {
      w.row(7);
      w.int8(batchId);
      w.text(b.file);
      w.int8(r.line);
      if (r.otherLine === undefined) w.null();
      else w.int8(r.otherLine);
      w.text(r.reason);
      w.text(r.raw);
      if (r.key === undefined) w.null();
      else w.text(r.key);
    }
    const chunks = [...w.take(), ...w.end()];
    await tx.copyFrom(
      'COPY rejected_rows (batch_id, file, line, other_line, reason, raw, key) FROM STDIN (FORMAT binary)',
      chunks,
    );
  }
  return batchId;
}

/**
 * Logs a stored batch in the change log (sql/000007.sql): its table and the days (weeks, for
 * prices) its rows cover. In replace mode the deleted rows match the file's own keys, so the
 * same range covers them. A table without days logs an unknown range.
 */
export async function recordChange(
  tx: DbSession,
  table: string,
  b: Pick<BatchOutcome, 'firstDay' | 'lastDay'>,
  batchId: number,
): Promise<void> {
  await tx.query(
    'INSERT INTO data_changes (table_name, first_day, last_day, batch_id) VALUES ($1, $2::date, $3::date, $4)',
    [
      table,
      b.firstDay === null ? null : formatDay(b.firstDay),
      b.lastDay === null ? null : formatDay(b.lastDay),
      batchId,
    ],
  );
}
