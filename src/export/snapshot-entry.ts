import { formatDay, parseDay } from '../core/days.js';
import { type DbSession, quoteIdent, safeIdent } from '../db/database.js';
import { LarderError, SqlState, sqlState, UsageError } from '../db/errors.js';

/** A feature column as the catalogue lists it (docs/contracts.md, "Snapshots"). */
export interface FeatureColumn {
  readonly name: string;
  readonly type: string;
  readonly family: string;
  readonly description: string;
}

/** The catalogue row of one snapshot, as export reads it. */
export interface SnapshotInfo {
  readonly snapshotId: number;
  readonly set: string;
  readonly cutoff: string;
  readonly definitionHash: string;
  readonly dataFingerprint: string;
  readonly tableName: string;
  readonly mode: 'shift' | 'origin';
  readonly horizon: number;
  readonly features: readonly FeatureColumn[];
  readonly rowCount: number;
  readonly trainRows: number;
  readonly predictRows: number;
  readonly builtAt: string;
}

/** No snapshot of the set at the cutoff (the CLI exits 1 naming both). */
export class SnapshotNotFoundError extends LarderError {
  constructor(set: string, cutoff: string) {
    super(
      'SNAPSHOT_NOT_FOUND',
      `no snapshot of set '${set}' at cutoff ${cutoff}: build it first (larder build)`,
    );
    this.name = 'SnapshotNotFoundError';
  }
}

interface CatalogueRow {
  snapshot_id: number;
  set_name: string;
  cutoff: string;
  definition_hash: string;
  data_fingerprint: string;
  table_name: string;
  mode: string;
  horizon: number;
  columns: unknown;
  row_count: number | null;
  train_rows: number | null;
  predict_rows: number | null;
  built_at: string;
}

/** A cutoff given as text, normalised; a bad one is a usage error. */
export function normaliseCutoff(cutoff: string): string {
  const d = parseDay(cutoff);
  if (d === null) throw new UsageError(`cutoff '${cutoff}' is not a valid day (YYYY-MM-DD)`);
  return formatDay(d);
}

/**
 * Reads the catalogue row of `(set, cutoff)`. Everything that reaches SQL (the table and column
 * names) is validated as a safe identifier first.
 */
export async function findSnapshot(s: DbSession, set: string, cutoff: string): Promise<SnapshotInfo> {
  const day = normaliseCutoff(cutoff);
  let rows: CatalogueRow[];
  try {
    rows = (
      await s.query<CatalogueRow>(
        `SELECT snapshot_id, set_name, cutoff::text AS cutoff, definition_hash, data_fingerprint, table_name, mode,
           horizon, columns, row_count, train_rows, predict_rows, to_char(built_at AT TIME ZONE 'UTC', 'YYYY-MM-DD"T"HH24:MI:SS"Z"') AS built_at
         FROM snapshots WHERE set_name = $1 AND cutoff = $2`,
        [set, day],
      )
    ).rows;
  } catch (err) {
    if (sqlState(err) === SqlState.undefinedTable) throw new SnapshotNotFoundError(set, day);
    throw err;
  }
  const r = rows[0];
  if (!r) throw new SnapshotNotFoundError(set, day);
  return toInfo(r);
}

function toInfo(r: CatalogueRow): SnapshotInfo {
  const where = `snapshot ${r.set_name} ${r.cutoff}`;
  if (!Array.isArray(r.columns)) throw new LarderError('CATALOGUE', `${where}: columns is not a JSON array`);
  const features = r.columns.map((c: unknown, i: number): FeatureColumn => {
    const col = c as Partial<FeatureColumn> | null;
    if (!col || typeof col.name !== 'string')
      throw new LarderError('CATALOGUE', `${where}: column ${i} has no name`);
    safeIdent(col.name, `${where}: column`);
    const type = typeof col.type === 'string' ? col.type : 'float8';
    if (type !== 'float8')
      throw new LarderError('CATALOGUE', `${where}: column ${col.name} has type ${type}, expected float8`);
    return Object.freeze({
      name: col.name,
      type,
      family: typeof col.family === 'string' ? col.family : '',
      description: typeof col.description === 'string' ? col.description : '',
    });
  });
  if (r.mode !== 'shift' && r.mode !== 'origin')
    throw new LarderError('CATALOGUE', `${where}: unknown mode '${r.mode}'`);
  return Object.freeze({
    snapshotId: Number(r.snapshot_id),
    set: r.set_name,
    cutoff: r.cutoff,
    definitionHash: r.definition_hash,
    dataFingerprint: r.data_fingerprint,
    tableName: safeIdent(r.table_name, `${where}: table_name`),
    mode: r.mode,
    horizon: r.horizon,
    features: Object.freeze(features),
    rowCount: Number(r.row_count ?? 0),
    trainRows: Number(r.train_rows ?? 0),
    predictRows: Number(r.predict_rows ?? 0),
    builtAt: r.built_at,
  });
}

/**
 * Pins the snapshot for the rest of the caller's transaction: takes a share lock on its table (a
 * rebuild's swap waits for it) and re-reads the catalogue; if a rebuild slipped in between, the
 * newer row is returned and pinned instead.
 */
export async function pinSnapshot(tx: DbSession, set: string, cutoff: string): Promise<SnapshotInfo> {
  for (let attempt = 0; attempt < 5; attempt++) {
    const info = await findSnapshot(tx, set, cutoff);
    try {
      await tx.query(`LOCK TABLE ${quoteIdent(info.tableName)} IN ACCESS SHARE MODE`);
    } catch (err) {
      if (sqlState(err) === SqlState.undefinedTable)
        throw new LarderError(
          'SNAPSHOT_TABLE',
          `${info.set} ${info.cutoff}: table ${info.tableName} is missing`,
          { cause: err },
        );
      throw err;
    }
    const again = await findSnapshot(tx, set, cutoff);
    if (again.snapshotId === info.snapshotId && again.tableName === info.tableName) return again;
  }
  throw new LarderError('SNAPSHOT_BUSY', `snapshot ${set} ${cutoff} kept changing while being opened`);
}
