import { createHash } from 'node:crypto';
import { formatDay, parseDay } from '../core/days.js';
import { type DbSession, quoteIdent } from '../db/database.js';

/**
 * Two small partial indexes on a snapshot table let the incremental refresh delete what a new
 * day retires (the prediction rows and the oldest training day) without scanning the table,
 * which at 57M sales rows holds 22M rows of some 40 float8 columns. Made on the empty staging
 * table when the runner plans a full build, they cost the partitions' COPY only the few
 * entries they hold; a refresh of a table without them (built by `larder build`) makes them
 * once, with one scan.
 */
const COVER_DAYS = 60;

type Exec = Pick<DbSession, 'query' | 'exec'>;

const name = (kind: string, table: string) =>
  `larder_${kind}_${createHash('sha256').update(table).digest('hex').slice(0, 12)}`;

/** Index of the prediction rows. */
function predictIndexSql(table: string): string {
  return `CREATE INDEX IF NOT EXISTS ${quoteIdent(name('prd', table))} ON ${quoteIdent(table)} (day) WHERE is_predict`;
}

/** Index of the training rows before `until` (exclusive), with `until` in its comment. */
async function makeOldIndex(tx: Exec, table: string, until: number): Promise<void> {
  const idx = quoteIdent(name('old', table));
  await tx.exec(`DROP INDEX IF EXISTS ${idx}`);
  await tx.exec(
    `CREATE INDEX ${idx} ON ${quoteIdent(table)} (day) WHERE NOT is_predict AND day < DATE '${formatDay(until)}'`,
  );
  await tx.exec(`COMMENT ON INDEX ${idx} IS '${formatDay(until)}'`);
}

/** Makes both indexes on a new (empty) snapshot table whose first training day is `trainFrom`. */
export async function prepareRefreshIndexes(tx: Exec, table: string, trainFrom: string): Promise<void> {
  await tx.exec(predictIndexSql(table));
  await makeOldIndex(tx, table, parseDay(trainFrom)! + COVER_DAYS);
}

/**
 * Before a refresh deletes the rows before `trainFrom`: makes sure both indexes exist and the
 * old-rows index covers those days (renewed every COVER_DAYS refreshes).
 */
export async function ensureRefreshIndexes(tx: Exec, table: string, trainFrom: string): Promise<void> {
  await tx.exec(predictIndexSql(table));
  const r = await tx.query<{ until: string | null }>(
    `SELECT obj_description(to_regclass($1), 'pg_class') AS until`,
    [quoteIdent(name('old', table))],
  );
  const until = r.rows[0]?.until ? parseDay(r.rows[0].until) : null;
  const from = parseDay(trainFrom)!;
  if (until === null || until <= from) await makeOldIndex(tx, table, from + COVER_DAYS);
}

/**
 * Deletes the rows a refresh retires whatever it computes: the prediction rows up to the new
 * cutoff (all of them when `cutoff` is null: nothing is kept) and the training rows before
 * `trainFrom`, each on its index.
 */
export async function deleteRetiredRows(
  tx: Exec,
  table: string,
  trainFrom: string,
  cutoff: string | null,
): Promise<{ train: number; predict: number }> {
  const t = quoteIdent(table);
  // Literal days, so the planner sees that the statement's condition implies the index's.
  const predict =
    cutoff === null
      ? (await tx.query(`DELETE FROM ${t} WHERE is_predict`)).rowCount
      : (
          await tx.query(
            `DELETE FROM ${t} WHERE is_predict AND day <= DATE '${formatDay(parseDay(cutoff)!)}'`,
          )
        ).rowCount;
  const train = (
    await tx.query(
      `DELETE FROM ${t} WHERE NOT is_predict AND day < DATE '${formatDay(parseDay(trainFrom)!)}'`,
    )
  ).rowCount;
  return { train, predict };
}

/**
 * With kept prediction rows: deletes the kept rows (after `cutoff`) of the series the refresh
 * computed whole (its delta holds their prediction rows up to `keptUntil`), and lists them.
 */
export async function deleteRecomputed(
  tx: Exec,
  table: string,
  keep: { cutoff: string; keptUntil: string; delta: string },
): Promise<{ predict: number; recomputed: number[] }> {
  const whole = (
    await tx.query<{ series_id: number }>(
      `SELECT DISTINCT series_id FROM ${quoteIdent(keep.delta)} WHERE is_predict AND day <= DATE '${formatDay(parseDay(keep.keptUntil)!)}'`,
    )
  ).rows.map((r) => Number(r.series_id));
  if (whole.length === 0) return { predict: 0, recomputed: [] };
  const predict = (
    await tx.query(
      `DELETE FROM ${quoteIdent(table)} WHERE is_predict AND day > DATE '${formatDay(parseDay(keep.cutoff)!)}' AND series_id = ANY($1::int4[])`,
      [whole],
    )
  ).rowCount;
  return { predict, recomputed: whole };
}
