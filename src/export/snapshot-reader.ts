import { type Column, readCopyBinary } from '../db/binary-copy.js';
import type { Db, DbSession } from '../db/database.js';
import { LarderError, SqlState, sqlState } from '../db/errors.js';
import type { ExportLayout } from './export-layout.js';

/** Rows per batch: fixed, so the same snapshot always splits into the same batches (and bytes). */
export const EXPORT_BATCH_ROWS = 65_536;

/** PostgreSQL sort memory for a sorted read of a snapshot table. */
export const SORT_WORK_MEM = '256MB';

/** Decoded snapshot rows: `columns[0]` is series_id, then the layout's table columns. */
export interface ExportBatch {
  readonly length: number;
  readonly columns: readonly Column[];
  readonly nulls: readonly Uint8Array[];
}

/** The table's physical order is not (series_id, origin, day): read it sorted instead. */
export class OutOfOrderError extends LarderError {
  constructor(at: number) {
    super('SNAPSHOT_ORDER', `snapshot rows are not stored in (series_id, origin, day) order (row ${at})`);
    this.name = 'OutOfOrderError';
  }
}

/**
 * Streams a snapshot table in (series_id, origin, day) order as binary COPY batches.
 *
 * `physical` reads the table in storage order, which the build writes sorted, and checks the
 * order row by row (throwing OutOfOrderError at the first violation); it avoids PostgreSQL's sort
 * of the whole wide table. Synchronized and parallel scans are turned off, since either would
 * start or interleave the scan elsewhere. `sorted` adds an ORDER BY.
 *
 * A COPY cannot simply be dropped half-way on a server connection (the connection would be left
 * mid-protocol), so leaving early cancels the statement and drains what is still in flight.
 */
export async function* readSnapshot(
  db: Db,
  tx: DbSession,
  layout: ExportLayout,
  mode: 'physical' | 'sorted',
  batchSize = EXPORT_BATCH_ROWS,
): AsyncGenerator<ExportBatch> {
  if (mode === 'physical') {
    await tx.exec(`SET LOCAL synchronize_seqscans = off; SET LOCAL max_parallel_workers_per_gather = 0;
      SET LOCAL enable_indexscan = off; SET LOCAL enable_indexonlyscan = off`);
  } else {
    await tx.exec(
      'RESET synchronize_seqscans; RESET max_parallel_workers_per_gather; RESET enable_indexscan; RESET enable_indexonlyscan',
    );
    // A larger sort budget means fewer merge passes (none at demo size); server only, as the
    // embedded database lives in this process's WebAssembly memory.
    if (db.kind === 'server') await tx.exec(`SET LOCAL work_mem = '${SORT_WORK_MEM}'`);
  }
  const pid =
    db.kind === 'server'
      ? (await tx.query<{ pid: number }>('SELECT pg_backend_pid() AS pid')).rows[0]!.pid
      : 0;
  const order = mode === 'sorted' ? ` ORDER BY series_id${layout.hasOrigin ? ', origin' : ''}, day` : '';
  const source = tx
    .copyTo(`COPY (${layout.select}${order}) TO STDOUT (FORMAT binary)`)
    [Symbol.asyncIterator]();
  // readCopyBinary must not close the COPY stream itself: only this function ends it properly.
  const guarded: AsyncIterable<Uint8Array> = {
    [Symbol.asyncIterator]: () => ({
      next: () => source.next(),
      return: async () => ({ done: true, value: undefined }),
    }),
  };
  let finished = false;
  let seen = 0;
  let lastSeries = -1;
  let lastOrigin = Number.NEGATIVE_INFINITY;
  let lastDay = Number.NEGATIVE_INFINITY;
  try {
    for await (const b of readCopyBinary(guarded, layout.copyTypes, batchSize)) {
      if (mode === 'physical') {
        const sid = b.columns[0] as Int32Array;
        const day = b.columns[1] as Int32Array;
        const origin = layout.hasOrigin ? (b.columns[2] as Int32Array) : undefined;
        for (let r = 0; r < b.length; r++) {
          const s = sid[r]!;
          const o = origin ? origin[r]! : 0;
          const d = day[r]!;
          const ahead =
            s > lastSeries || (s === lastSeries && (o > lastOrigin || (o === lastOrigin && d > lastDay)));
          if (!ahead) throw new OutOfOrderError(seen + r + 1);
          lastSeries = s;
          lastOrigin = o;
          lastDay = d;
        }
      }
      seen += b.length;
      yield b;
    }
    finished = true;
  } finally {
    if (!finished) await abandon(db, pid, source);
  }
}

async function abandon(db: Db, pid: number, source: AsyncIterator<Uint8Array>): Promise<void> {
  // Cancelling needs a second connection; with a single one the rest is read and dropped.
  if (db.kind === 'server' && db.parallelism > 1) {
    await db.query('SELECT pg_cancel_backend($1)', [pid]).catch(() => undefined);
  }
  try {
    while (!(await source.next()).done) {
      // discard
    }
  } catch (err) {
    if (sqlState(err) !== SqlState.queryCanceled) throw err;
  }
}
