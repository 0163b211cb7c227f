import type { DbSession } from '../db/database.js';
import { LarderError, SqlState, sqlState } from '../db/errors.js';
import { safeIdent } from '../db/database.js';

/** A feature column as the catalogue lists it (docs/contracts.md, "Snapshots"). */
export interface SnapshotColumn {
  readonly name: string;
  readonly type: string;
  readonly family?: string;
  readonly description?: string;
}

/** The catalogue row of one snapshot, as publish and the fallback need it. */
export interface SnapshotEntry {
  readonly snapshotId: number;
  readonly set: string;
  readonly cutoff: string;
  readonly definitionHash: string;
  readonly tableName: string;
  readonly mode: string;
  readonly horizon: number;
  readonly columns: readonly SnapshotColumn[];
  readonly predictRows: number;
}

interface CatalogueRow {
  snapshot_id: number;
  set_name: string;
  cutoff: string;
  definition_hash: string;
  table_name: string;
  mode: string;
  horizon: number;
  columns: unknown;
  predict_rows: number | null;
}

/** The set or snapshot asked for does not exist (HTTP 404). */
export class NotFoundError extends LarderError {
  constructor(code: 'UNKNOWN_SET' | 'UNKNOWN_SERIES' | 'SNAPSHOT_NOT_FOUND', message: string) {
    super(code, message);
    this.name = 'NotFoundError';
  }
}

const SELECT = `SELECT snapshot_id, set_name, cutoff::text AS cutoff, definition_hash, table_name, mode,
  horizon, columns, predict_rows FROM snapshots`;

/** Validates a catalogue row; identifiers that reach SQL (table, columns) must be safe. */
export function toSnapshotEntry(r: CatalogueRow): SnapshotEntry {
  const where = `snapshot ${r.set_name} ${r.cutoff}`;
  if (!Array.isArray(r.columns)) throw new LarderError('CATALOGUE', `${where}: columns is not a JSON array`);
  const columns = r.columns.map((c: unknown, i: number) => {
    const col = c as Partial<SnapshotColumn> | null;
    if (!col || typeof col.name !== 'string')
      throw new LarderError('CATALOGUE', `${where}: column ${i} has no name`);
    safeIdent(col.name, `${where}: column`);
    return Object.freeze({
      name: col.name,
      type: typeof col.type === 'string' ? col.type : 'float8',
      ...(typeof col.family === 'string' ? { family: col.family } : {}),
      ...(typeof col.description === 'string' ? { description: col.description } : {}),
    });
  });
  if (!Number.isInteger(r.horizon) || r.horizon < 1) {
    throw new LarderError('CATALOGUE', `${where}: horizon ${r.horizon} is not a positive integer`);
  }
  return Object.freeze({
    snapshotId: Number(r.snapshot_id),
    set: r.set_name,
    cutoff: r.cutoff,
    definitionHash: r.definition_hash,
    tableName: safeIdent(r.table_name, `${where}: table_name`),
    mode: r.mode,
    horizon: r.horizon,
    columns: Object.freeze(columns),
    predictRows: Number(r.predict_rows ?? 0),
  });
}

/** Reads the catalogue row of `(set, cutoff)`; a missing one is a NotFoundError naming both. */
export async function findSnapshot(db: DbSession, set: string, cutoff: string): Promise<SnapshotEntry> {
  let rows: CatalogueRow[];
  try {
    rows = (
      await db.query<CatalogueRow>(`${SELECT} WHERE set_name = $1 AND cutoff = $2::date`, [set, cutoff])
    ).rows;
  } catch (err) {
    if (sqlState(err) === SqlState.undefinedTable) {
      throw new NotFoundError('SNAPSHOT_NOT_FOUND', `no snapshot catalogue yet: build set '${set}' first`);
    }
    throw err;
  }
  const row = rows[0];
  if (!row) {
    const others = (
      await db.query<{ cutoff: string }>(
        'SELECT cutoff::text AS cutoff FROM snapshots WHERE set_name = $1 ORDER BY cutoff DESC LIMIT 5',
        [set],
      )
    ).rows.map((r) => r.cutoff);
    throw new NotFoundError(
      'SNAPSHOT_NOT_FOUND',
      others.length
        ? `no snapshot of set '${set}' for cutoff ${cutoff} (built cutoffs: ${others.join(', ')})`
        : `no snapshot of set '${set}': build it first`,
    );
  }
  return toSnapshotEntry(row);
}

/** The snapshot behind the newest finished publish of a set, or null if the set was never published. */
export async function findPublishedSnapshot(
  db: DbSession,
  set: string,
): Promise<{ entry: SnapshotEntry; version: number } | null> {
  const { rows } = await db.query<CatalogueRow & { version: number }>(
    `SELECT s.snapshot_id, s.set_name, s.cutoff::text AS cutoff, s.definition_hash, s.table_name, s.mode,
       s.horizon, s.columns, s.predict_rows, p.version
     FROM publishes p JOIN snapshots s ON s.set_name = p.set_name AND s.cutoff = p.cutoff
     WHERE p.set_name = $1 AND p.status = 'done'
     ORDER BY p.finished_at DESC, p.publish_id DESC LIMIT 1`,
    [set],
  );
  const row = rows[0];
  return row ? { entry: toSnapshotEntry(row), version: Number(row.version) } : null;
}
