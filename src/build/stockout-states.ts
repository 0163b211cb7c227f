import { formatDay, parseDay } from '../core/days.js';
import type { DbSession } from '../db/database.js';
import type { ResolvedFeatureSet } from '../features/feature-set.js';
import { LEVELS } from '../features/group-levels.js';
import type { StockoutState } from '../features/stockout-state.js';

type Query = Pick<DbSession, 'query'>;

/** Whether builds of `set` keep the stock-out rule's state (shift mode with a stock-out mask). */
export function keepsStockoutStates(set: ResolvedFeatureSet): boolean {
  return set.stockout !== null && set.shape.mode === 'shift';
}

/**
 * How many days before its first new day a refresh of `set` reads: the sales reach of its
 * families, the group reach when store-level groups are summed from the partition's own rows,
 * and the stock-out rule's lookback. States keep the stock-out runs that reach into that span.
 */
export function refreshReach(set: ResolvedFeatureSet): number {
  let reach = set.stockout?.lookback ?? 0;
  for (const f of set.families) {
    const n = f.family.needs(f.params, set.shape);
    if (n.sales) reach = Math.max(reach, n.salesReach);
    if (n.levels.some((l) => LEVELS[l].scope === 'store')) reach = Math.max(reach, n.groupReach);
  }
  return reach;
}

/** Replaces the states of one partition's series under `table` (idempotent for a rerun). */
export async function writeStockoutStates(
  tx: Query,
  table: string,
  store: string,
  states: ReadonlyArray<{ readonly seriesId: number; readonly state: StockoutState }>,
): Promise<void> {
  await tx.query(
    'DELETE FROM stockout_states WHERE table_name = $1 AND series_id IN (SELECT series_id FROM series WHERE store_id = $2)',
    [table, store],
  );
  if (states.length === 0) return;
  const d = (x: number | null) => (x === null ? null : formatDay(x));
  await tx.query(
    `INSERT INTO stockout_states (table_name, series_id, cutoff, first_sale, open_start, open_kstar, runs)
     SELECT $1, s, c::date, f::date, o::date, k, string_to_array(r, ',')::int4[]
     FROM unnest($2::int4[], $3::text[], $4::text[], $5::text[], $6::float8[], $7::text[]) AS u(s, c, f, o, k, r)`,
    [
      table,
      states.map((x) => x.seriesId),
      states.map((x) => formatDay(x.state.cutoff)),
      states.map((x) => d(x.state.firstSale)),
      states.map((x) => d(x.state.openStart)),
      states.map((x) => x.state.openKStar),
      states.map((x) => Array.from(x.state.runs).join(',')),
    ],
  );
}

/** The states of one partition's series under `table`. */
export async function readStockoutStates(
  tx: Query,
  table: string,
  store: string,
): Promise<Map<number, StockoutState>> {
  const r = await tx.query<{
    series_id: number;
    cutoff: string;
    first_sale: string | null;
    open_start: string | null;
    open_kstar: number;
    runs: string;
  }>(
    `SELECT t.series_id, t.cutoff, t.first_sale, t.open_start, t.open_kstar, array_to_string(t.runs, ',') AS runs
     FROM stockout_states t WHERE t.table_name = $1
       AND t.series_id IN (SELECT series_id FROM series WHERE store_id = $2)`,
    [table, store],
  );
  const out = new Map<number, StockoutState>();
  for (const x of r.rows) {
    out.set(Number(x.series_id), {
      cutoff: parseDay(x.cutoff)!,
      firstSale: x.first_sale === null ? null : parseDay(x.first_sale)!,
      openStart: x.open_start === null ? null : parseDay(x.open_start)!,
      openKStar: Number(x.open_kstar),
      runs: x.runs === '' ? new Int32Array(0) : Int32Array.from(x.runs.split(','), Number),
    });
  }
  return out;
}

/** Whether `table` has states taken at `cutoff` (a build that kept them). */
export async function hasStockoutStates(db: Query, table: string, cutoff: string): Promise<boolean> {
  const r = await db.query<{ ok: boolean }>(
    'SELECT EXISTS (SELECT 1 FROM stockout_states WHERE table_name = $1 AND cutoff = $2::date) AS ok',
    [table, cutoff],
  );
  return r.rows[0]!.ok;
}

/** Makes the states written under `from` (a refresh's own table) those of `to`, replacing its old ones. */
export async function moveStockoutStates(tx: Query, from: string, to: string): Promise<void> {
  await tx.query('DELETE FROM stockout_states WHERE table_name = $1', [to]);
  await tx.query('UPDATE stockout_states SET table_name = $2 WHERE table_name = $1', [from, to]);
}

/** Drops the states of tables that no longer exist (rebuilt, refreshed or removed snapshots). */
export async function dropOrphanStockoutStates(db: Query): Promise<void> {
  await db.query(
    `DELETE FROM stockout_states WHERE table_name IN (
       SELECT table_name FROM (SELECT DISTINCT table_name FROM stockout_states) t
       WHERE to_regclass(quote_ident(t.table_name)) IS NULL)`,
  );
}
