/**
 * The loader's set-based SQL, as pure functions of a target's contract. Table and column names
 * come from the fixed contracts in targets.ts, never from user input; values are parameters.
 */
import { quoteIdent } from '../db/database.js';
import { keyColumns, type LoadMode, type TargetSpec } from './targets.js';

/** The temporary staging table of one load batch (dropped at commit or rollback). */
export const STAGE = 'larder_load_stage';

interface StageColumn {
  readonly name: string;
  readonly type: string;
}

/** Staging columns: sales carry series ids; the others their contract columns. Plus the line. */
export function stageColumns(spec: TargetSpec): readonly StageColumn[] {
  const cols: StageColumn[] =
    spec.target === 'sales'
      ? [
          { name: 'series_id', type: 'int4' },
          { name: 'day', type: 'date' },
          { name: 'units', type: 'int4' },
        ]
      : spec.columns.map((c) => ({
          name: c.name,
          // Prices travel as exact integers of 1/10,000ths (binary COPY has no cheap numeric writer).
          type: c.kind === 'day' ? 'date' : c.kind === 'price' ? 'int8' : 'text',
        }));
  return [...cols, { name: 'line', type: 'int8' }];
}

/** Table columns the rows land in. */
function tableColumns(spec: TargetSpec): readonly string[] {
  return spec.target === 'sales' ? ['series_id', 'day', 'units'] : spec.columns.map((c) => c.name);
}

/** Key columns on the table side (sales: series_id, day). */
function tableKey(spec: TargetSpec): readonly string[] {
  return spec.target === 'sales' ? ['series_id', 'day'] : keyColumns(spec).map((c) => c.name);
}

/** Columns `replace` matches on, on the table side. */
function replaceKey(spec: TargetSpec): readonly string[] {
  return spec.target === 'sales' ? ['series_id', 'day'] : spec.replaceBy;
}

const q = quoteIdent;
const list = (cols: readonly string[], alias = '') =>
  cols.map((c) => (alias ? `${alias}.${q(c)}` : q(c))).join(', ');
const join = (cols: readonly string[]) => cols.map((c) => `t.${q(c)} = s.${q(c)}`).join(' AND ');

/** Marks the batch's transaction as the loader's: the raw tables' change triggers stay quiet (sql/000007.sql). */
export const LOADER_SESSION_SQL = "SELECT set_config('larder.loader', 'on', true)";

/** Writers of the same table serialize; readers are never blocked. */
export function lockSql(spec: TargetSpec): string {
  const tables = spec.target === 'sales' ? 'series, sales' : q(spec.table);
  return `LOCK TABLE ${tables} IN SHARE ROW EXCLUSIVE MODE`;
}

export function createStageSql(spec: TargetSpec): string {
  const cols = stageColumns(spec).map((c) => `${q(c.name)} ${c.type}`);
  return `CREATE TEMP TABLE ${STAGE} (${cols.join(', ')}) ON COMMIT DROP`;
}

export function copyStageSql(spec: TargetSpec): string {
  return `COPY ${STAGE} (${list(stageColumns(spec).map((c) => c.name))}) FROM STDIN (FORMAT binary)`;
}

/** The fast path: rows straight into the target (no stored row can conflict). */
export function copyTargetSql(spec: TargetSpec): string {
  return `COPY ${q(spec.table)} (${list(tableColumns(spec))}) FROM STDIN (FORMAT binary)`;
}

/** True when the target holds at least one row. */
export function hasRowsSql(spec: TargetSpec): string {
  return `SELECT EXISTS (SELECT 1 FROM ${q(spec.table)}) AS has`;
}

/**
 * Staged rows whose key is already stored (append mode), first ones by line, with the total as
 * `n` on every row. Sales name their key by item and store through `series`.
 */
export function conflictsSql(spec: TargetSpec): string {
  const keySelect =
    spec.target === 'sales'
      ? 'sr.item_id, sr.store_id, s.day'
      : keyColumns(spec)
          .map((c) => `s.${q(c.name)}`)
          .join(', ');
  const from =
    spec.target === 'sales' ? `${STAGE} s JOIN series sr ON sr.series_id = s.series_id` : `${STAGE} s`;
  return (
    `SELECT count(*) OVER ()::int8 AS n, s.line, ${keySelect} FROM ${from} ` +
    `WHERE EXISTS (SELECT 1 FROM ${q(spec.table)} t WHERE ${join(tableKey(spec))}) ORDER BY s.line LIMIT $1`
  );
}

/** Deletes the stored rows a replace batch covers (exactly its keys, or days for events). */
export function replaceDeleteSql(spec: TargetSpec): string {
  const by = replaceKey(spec);
  return `DELETE FROM ${q(spec.table)} t USING (SELECT DISTINCT ${list(by)} FROM ${STAGE}) s WHERE ${join(by)}`;
}

/** Moves the staged rows into the target; append skips rows whose key is stored. */
export function insertFromStageSql(spec: TargetSpec, mode: LoadMode): string {
  const cols = tableColumns(spec);
  const values = cols.map((c) => {
    const col = spec.columns.find((x) => x.name === c);
    return col?.kind === 'price' ? `(s.${q(c)}::numeric / 10000)::numeric(14, 4)` : `s.${q(c)}`;
  });
  const where =
    mode === 'append'
      ? ` WHERE NOT EXISTS (SELECT 1 FROM ${q(spec.table)} t WHERE ${join(tableKey(spec))})`
      : '';
  return `INSERT INTO ${q(spec.table)} (${list(cols)}) SELECT ${values.join(', ')} FROM ${STAGE} s${where}`;
}

export const SERIES_COPY_IN = 'COPY series (series_id, item_id, store_id) FROM STDIN (FORMAT binary)';
export const SERIES_COPY_OUT =
  'COPY (SELECT series_id, item_id, store_id FROM series) TO STDOUT (FORMAT binary)';
export const SERIES_NEXT_ID = 'SELECT coalesce(max(series_id), 0)::int4 + 1 AS next FROM series';
/** New series get explicit ids; the identity sequence must then move past them. */
export const SERIES_SYNC_SEQUENCE =
  "SELECT setval(pg_get_serial_sequence('series', 'series_id'), (SELECT max(series_id) FROM series))";
