import type { DbSession } from '../db/database.js';
import { LarderError } from '../db/errors.js';
import type { FamilyName } from '../features/family.js';

/** A feature column as recorded in the catalogue (table order). */
export interface SnapshotColumn {
  readonly name: string;
  readonly type: 'float8';
  readonly family: FamilyName;
  readonly description: string;
}

/** A built snapshot, as its catalogue row describes it. */
export interface SnapshotInfo {
  readonly snapshotId: number;
  readonly set: string;
  readonly cutoff: string;
  readonly definitionHash: string;
  readonly dataFingerprint: string;
  readonly tableName: string;
  readonly mode: 'shift' | 'origin';
  readonly horizon: number;
  readonly trainFrom: string;
  readonly rowCount: number;
  readonly trainRows: number;
  readonly predictRows: number;
  readonly columns: ReadonlyArray<SnapshotColumn>;
  readonly builtAt: string;
  readonly timings: Readonly<Record<string, unknown>>;
  /** Code dictionaries of coded features (event names and kinds). */
  readonly codes: Readonly<Record<string, readonly string[]>>;
}

interface Row {
  snapshot_id: number;
  set_name: string;
  cutoff: string;
  definition_hash: string;
  data_fingerprint: string;
  table_name: string;
  mode: 'shift' | 'origin';
  horizon: number;
  train_from: string;
  row_count: number;
  train_rows: number;
  predict_rows: number;
  columns: SnapshotColumn[];
  built_at: Date | string;
  timings: Record<string, unknown>;
  codes: Record<string, string[]>;
}

const COLUMNS = `snapshot_id, set_name, cutoff, definition_hash, data_fingerprint, table_name, mode, horizon,
  train_from, row_count, train_rows, predict_rows, columns, built_at, timings, codes`;

function toInfo(r: Row): SnapshotInfo {
  return {
    snapshotId: Number(r.snapshot_id),
    set: r.set_name,
    cutoff: r.cutoff,
    definitionHash: r.definition_hash,
    dataFingerprint: r.data_fingerprint,
    tableName: r.table_name,
    mode: r.mode,
    horizon: r.horizon,
    trainFrom: r.train_from,
    rowCount: Number(r.row_count),
    trainRows: Number(r.train_rows),
    predictRows: Number(r.predict_rows),
    columns: r.columns,
    builtAt: r.built_at instanceof Date ? r.built_at.toISOString() : String(r.built_at),
    timings: r.timings,
    codes: r.codes,
  };
}

/** The catalogue row of a snapshot, or null when (set, cutoff) was never built. */
export async function getSnapshot(db: DbSession, set: string, cutoff: string): Promise<SnapshotInfo | null> {
  const r = await db.query<Row>(`SELECT ${COLUMNS} FROM snapshots WHERE set_name = $1 AND cutoff = $2`, [
    set,
    cutoff,
  ]);
  return r.rows[0] ? toInfo(r.rows[0]) : null;
}

/** Every snapshot, newest cutoff first within each set; optionally one set's. */
export async function listSnapshots(db: DbSession, set?: string): Promise<SnapshotInfo[]> {
  const r = set
    ? await db.query<Row>(`SELECT ${COLUMNS} FROM snapshots WHERE set_name = $1 ORDER BY cutoff DESC`, [set])
    : await db.query<Row>(`SELECT ${COLUMNS} FROM snapshots ORDER BY set_name, cutoff DESC`);
  return r.rows.map(toInfo);
}

/**
 * Runs `fn` on one snapshot with its catalogue row locked FOR SHARE inside a transaction, so a
 * rebuild cannot swap the table while `fn` reads it: the reader sees the old snapshot whole, or
 * (if the swap committed first) the new one whole.
 */
export async function withSnapshot<T>(
  db: { transaction<R>(fn: (tx: DbSession) => Promise<R>): Promise<R> },
  set: string,
  cutoff: string,
  fn: (tx: DbSession, info: SnapshotInfo) => Promise<T>,
): Promise<T> {
  return db.transaction(async (tx) => {
    const r = await tx.query<Row>(
      `SELECT ${COLUMNS} FROM snapshots WHERE set_name = $1 AND cutoff = $2 FOR SHARE`,
      [set, cutoff],
    );
    if (!r.rows[0])
      throw new LarderError(
        'NO_SNAPSHOT',
        `no snapshot of set '${set}' for cutoff ${cutoff}: run larder build`,
      );
    return fn(tx, toInfo(r.rows[0]));
  });
}
