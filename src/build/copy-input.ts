import { formatDay, parseDay } from '../core/days.js';
import { readCopyBinary, readCopyTuples } from '../db/binary-copy.js';
import type { DbSession } from '../db/database.js';
import type { CacheState } from '../checks/cache-sink.js';
import { planPriceHistory } from '../checks/price-history.js';
import { type RecentSales, recentFirstDays, recentSales } from '../checks/recent-sales.js';
import { BLOCK_DAYS, blockOf, NO_ROW, planBlocks } from '../checks/sales-blocks.js';
import {
  addItemPrices,
  type PartitionSeries,
  readPartitionSales,
  salesCopySql,
  type StorePrices,
} from './partition-input.js';
import { quoteLiteral } from './sql-text.js';

/**
 * A partition's inputs read from the checks' copies of the raw tables (sql/000009.sql and
 * 000010.sql) instead of from the tables: the runner's checks bring both copies up to date just
 * before the build, and a copy holds a series' days (or an item's weeks) in one value, where the
 * tables hold one row per day or week. Each reader gives exactly what its table reader would,
 * or null when the copy may not be used, and the caller reads the table.
 */

const REC = 12;

/** A series whose dense units (from the read's base, NaN: no row) a sales reader fills. */
export interface DenseSeries {
  readonly seriesId: number;
  units: Float64Array;
}

/**
 * The condition that the blocks are still the ones planned (`planBlocks`), put in the statement
 * that reads them: blocks rewritten meanwhile give no rows at all.
 */
const blocksCurrent = (st: CacheState) =>
  `EXISTS (SELECT 1 FROM sales_blocks_state WHERE covered_to = DATE '${formatDay(st.coveredTo)}'
     AND change_last = ${st.last} AND change_count = ${st.count})`;

/** A (series_id, block, units) row as sql/000009.sql stores it, by its field lengths. */
function checkBlockShape(at: ArrayLike<number>): void {
  if (at[1] !== 4 || at[3] !== 4 || at[5] !== BLOCK_DAYS * 4)
    throw new Error('sales_blocks: a block row of an unexpected shape');
}

/**
 * One store's sales from `base` to `cutoff`, as `readPartitionSales` fills them: the days the
 * blocks may give (up to their usable day) from `sales_blocks`, the later ones from `sales` by a
 * range scan per series. Returns the rows read, or null when the blocks may not be used.
 */
export async function readStoreSalesFromBlocks(
  s: DbSession,
  store: string,
  series: readonly DenseSeries[],
  base: number,
  cutoff: number,
): Promise<number | null> {
  const plan = await planBlocks(s);
  if (plan.usable === null || plan.state === null) return null;
  const usable = Math.min(plan.usable, cutoff);
  if (usable < base) return null;
  const len = cutoff - base + 1;
  const index = new Map<number, DenseSeries>();
  for (const x of series) {
    x.units = new Float64Array(len).fill(Number.NaN);
    index.set(x.seriesId, x);
  }
  const st = plan.state;
  const mem = recentSales(st, base, usable);
  let rows = 0;
  if (mem) rows = fillFromRecent(mem, series, base, usable);
  else {
    // The blocks of each series by its key (OFFSET 0 keeps the loop): nothing analyses the
    // blocks, and the planner's guess scanned all of them for each store (0.2 s, not 0.04 s).
    const sql = `COPY (SELECT b.series_id, b.block, b.units FROM series r CROSS JOIN LATERAL
        (SELECT b.series_id, b.block, b.units FROM sales_blocks b WHERE b.series_id = r.series_id
          AND b.block BETWEEN ${blockOf(base)} AND ${blockOf(usable)} OFFSET 0) b
        WHERE r.store_id = ${quoteLiteral(store)} AND ${blocksCurrent(st)}
        ORDER BY b.series_id, b.block) TO STDOUT (FORMAT binary)`;
    const blocks = await readCopyTuples(s.copyTo(sql), 3, (dv, _bytes, at) => {
      checkBlockShape(at);
      const x = index.get(dv.getInt32(at[0]!));
      if (!x) return;
      const first = dv.getInt32(at[2]!) * BLOCK_DAYS;
      const lo = Math.max(first, base);
      const hi = Math.min(first + BLOCK_DAYS - 1, usable);
      const off = at[4]!;
      for (let d = lo; d <= hi; d++) {
        const v = dv.getInt32(off + 4 * (d - first), true);
        if (v !== NO_ROW) {
          x.units[d - base] = v;
          rows++;
        }
      }
    });
    if (blocks === 0 && series.length > 0) return null;
  }
  if (usable < cutoff) {
    for await (const b of readCopyBinary(s.copyTo(salesCopySql(store, usable + 1, cutoff)), [
      'int4',
      'date',
      'int4',
    ])) {
      const ids = b.columns[0] as Int32Array;
      const days = b.columns[1] as Int32Array;
      const units = b.columns[2] as Int32Array;
      for (let r = 0; r < b.length; r++) {
        const x = index.get(ids[r]!);
        if (x) x.units[days[r]! - base] = units[r]!;
      }
      rows += b.length;
    }
  }
  return rows;
}

/** Days base..usable of each series from the kept recent days (the blocks' values, from memory). */
function fillFromRecent(
  mem: RecentSales,
  series: readonly DenseSeries[],
  base: number,
  usable: number,
): number {
  let rows = 0;
  for (const x of series) rows += mem.copy(x.seriesId, base, usable, x.units, base);
  return rows;
}

/**
 * The first stored day of each of the store's series on or before `cutoff`, as a probe of `sales`
 * per series finds it (`readPartitionSeries`), from each series' first block: those blocks are read
 * by every check pass, so they are in memory where the first rows of `sales` are not (measured on
 * the 57M-row chain: 0.14-2 s a store by the table). A series without a stored day up to the
 * blocks' usable day is looked up in `sales` after that day. Null when the blocks may not be used.
 */
export async function readStoreFirstDays(
  s: DbSession,
  store: string,
  cutoff: number,
): Promise<Map<number, number> | null> {
  const plan = await planBlocks(s);
  if (plan.usable === null || plan.state === null) return null;
  const usable = Math.min(plan.usable, cutoff);
  const st = plan.state;
  const out = new Map<number, number>();
  const mem = recentFirstDays(st, usable);
  if (mem) {
    // The first days this process's check pass saw, which are its blocks' first days.
    const ids = await s.query<{ id: number }>('SELECT series_id AS id FROM series WHERE store_id = $1', [
      store,
    ]);
    for (const { id } of ids.rows) {
      const first = mem.get(id);
      if (first !== undefined && first <= usable) out.set(id, first);
    }
    if (out.size === 0) return null;
  } else {
    const sql = `COPY (SELECT r.series_id, b.block, b.units FROM series r CROSS JOIN LATERAL
        (SELECT b.block, b.units FROM sales_blocks b WHERE b.series_id = r.series_id ORDER BY b.block LIMIT 1) b
        WHERE r.store_id = ${quoteLiteral(store)} AND ${blocksCurrent(st)}
        ) TO STDOUT (FORMAT binary)`;
    const blocks = await readCopyTuples(s.copyTo(sql), 3, (dv, _bytes, at) => {
      checkBlockShape(at);
      const first = dv.getInt32(at[2]!) * BLOCK_DAYS;
      for (let k = 0; k < BLOCK_DAYS && first + k <= usable; k++) {
        if (dv.getInt32(at[4]! + 4 * k, true) !== NO_ROW) {
          out.set(dv.getInt32(at[0]!), first + k);
          break;
        }
      }
    });
    // No block at all: no copy (or one rewritten meanwhile, which the guard answers with no rows).
    if (blocks === 0) return null;
  }
  if (usable < cutoff) {
    const later = await s.query<{ series_id: number; first_day: string }>(
      `SELECT r.series_id, f.first_day FROM series r CROSS JOIN LATERAL
         (SELECT min(x.day) AS first_day FROM sales x WHERE x.series_id = r.series_id
           AND x.day > $2::date AND x.day <= $3::date) f
       WHERE r.store_id = $1 AND f.first_day IS NOT NULL`,
      [store, formatDay(usable), formatDay(cutoff)],
    );
    for (const r of later.rows) if (!out.has(r.series_id)) out.set(r.series_id, parseDay(r.first_day)!);
  }
  return out;
}

/** `readStoreSalesFromBlocks`, or the table when the blocks may not be used. */
export async function readStoreSales(
  s: DbSession,
  store: string,
  series: readonly PartitionSeries[],
  base: number,
  cutoff: number,
): Promise<number> {
  return (
    (await readStoreSalesFromBlocks(s, store, series, base, cutoff)) ??
    (await readPartitionSales(s, store, series, base, cutoff))
  );
}

/**
 * One store's prices up to the price boundary as `readPartitionPrices` gives them: each item's
 * packed weeks from `price_history`, and the weeks after its covered week from `prices` by a
 * short range scan per item. Null when the copy may not be used (none stored, a price change it
 * does not hold, or a new copy written while this read ran).
 */
export async function readStorePricesFromCopy(
  s: DbSession,
  store: string,
  priceBoundary: number,
  departmentOf: ReadonlyMap<string, string | null>,
): Promise<StorePrices | null> {
  const plan = await planPriceHistory(s);
  if (plan.usable === null || plan.state === null) return null;
  const covered = plan.usable;
  const st = quoteLiteral(store);
  const day = (d: number) => `DATE '${formatDay(d)}'`;
  const newer =
    covered >= priceBoundary
      ? 'NULL::bytea'
      : `(SELECT string_agg(int4send(p.week_start - DATE '1970-01-01') || float8send(p.price::float8), ''::bytea ORDER BY p.week_start)
          FROM prices p WHERE p.item_id = r.item_id AND p.store_id = r.store_id
            AND p.week_start > ${day(covered)} AND p.week_start <= ${day(priceBoundary)})`;
  // One statement, so the state guard and the rows come from one snapshot: a copy rewritten in
  // between would hold other weeks than the covered week says.
  const sql = `COPY (SELECT r.item_id, h.recs, ${newer} AS newer
      FROM series r LEFT JOIN price_history h ON h.item_id = r.item_id AND h.store_id = r.store_id
      WHERE r.store_id = ${st} AND EXISTS (SELECT 1 FROM price_history_state
        WHERE covered_to = ${day(covered)} AND change_last = ${plan.state.last} AND change_count = ${plan.state.count})
      ORDER BY r.item_id) TO STDOUT (FORMAT binary)`;
  const expected = (
    await s.query<{ n: number }>('SELECT count(*)::int AS n FROM series WHERE store_id = $1', [store])
  ).rows[0]!.n;
  const out: StorePrices = { prices: new Map(), deptPrices: new Map() };
  const text = new TextDecoder();
  let weeks = new Int32Array(512);
  let values = new Float64Array(512);
  const rows = await readCopyTuples(s.copyTo(sql), 3, (dv, bytes, at) => {
    const item = text.decode(bytes.subarray(at[0]!, at[0]! + at[1]!));
    const total = Math.max(0, at[3]!) / REC + Math.max(0, at[5]!) / REC;
    if (total > weeks.length) {
      weeks = new Int32Array(2 * total);
      values = new Float64Array(2 * total);
    }
    let n = 0;
    for (const k of [2, 4]) {
      if (at[k + 1]! < 0) continue;
      const from = at[k]!;
      const m = at[k + 1]! / REC;
      for (let i = 0; i < m; i++) {
        const w = dv.getInt32(from + REC * i);
        if (w > priceBoundary) break; // records are in week order
        weeks[n] = w;
        values[n++] = dv.getFloat64(from + REC * i + 4);
      }
    }
    // As `readPartitionPrices`: an item without a price row is not in the maps.
    if (n > 0) addItemPrices(out, item, departmentOf.get(item), weeks.slice(0, n), values.slice(0, n));
  });
  return rows === expected ? out : null;
}
