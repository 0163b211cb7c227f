import { formatDay } from '../core/days.js';
import { readCopyBinary } from '../db/binary-copy.js';
import type { Db } from '../db/database.js';
import {
  extendPriceHistory,
  type PriceHistoryPlan,
  PriceHistorySink,
  planPriceHistory,
  readPriceHistory,
} from './price-history.js';
import type { Guarded } from './shared-pass.js';

/** The weekly prices of one item in one store, in week order; arrays are reused for the next group. */
export interface PriceSeriesView {
  readonly itemId: string;
  readonly storeId: string;
  /** The series with sales for this item and store, or null when none was ever loaded. */
  readonly seriesId: number | null;
  /** Epoch days of each row's week_start. */
  readonly weeks: Int32Array;
  readonly prices: Float64Array;
  readonly n: number;
}

export interface PriceVisitor {
  prices(p: PriceSeriesView): void;
}

export interface PricePassResult {
  readonly rows: number;
  readonly groups: number;
  /** series_id -> sorted week starts that carry a price (for sold-week coverage). */
  readonly pricedWeeks: ReadonlyMap<number, Int32Array>;
  /** Where the pass read from: the stored copy up to a week (null: `prices` only). */
  readonly source: {
    readonly historyTo: string | null;
    readonly reason: string | null;
    readonly stored: boolean;
  };
}

const weekFilter = (cutoff: number | null) =>
  cutoff === null ? '' : ` WHERE week_start <= DATE '${formatDay(cutoff)}'`;

/** Week starts and prices in key order; the key itself comes from `pricesGroupsSql`, not per row. */
export function pricesCopySql(cutoff: number | null): string {
  // The primary key's order, so PostgreSQL reads it by index without sorting.
  return (
    `COPY (SELECT week_start, price::float8 FROM prices${weekFilter(cutoff)} ` +
    'ORDER BY item_id, store_id, week_start) TO STDOUT (FORMAT binary)'
  );
}

/** Each item and store with its row count, in the same order as `pricesCopySql`. */
export function pricesGroupsSql(cutoff: number | null): string {
  return `SELECT item_id, store_id, count(*)::int AS n FROM prices${weekFilter(cutoff)} GROUP BY item_id, store_id ORDER BY item_id, store_id`;
}

/**
 * Streams prices once in key order, grouping rows by item and store for the visitors. The ids
 * come from one grouped query and the rows from a COPY of just (week_start, price), both in one
 * repeatable-read transaction: decoding two text ids on each of millions of rows would cost more
 * than the rows themselves. When the checks' copy of the prices (price-history.ts) is valid, the
 * groups come from it instead, one row each, with the newer weeks appended; a pass over the
 * table writes the copy, a pass over the copy appends the newer weeks to it.
 */
export async function runPricePass(
  db: Db,
  cutoff: number | null,
  visitors: ReadonlyArray<Guarded<PriceVisitor>>,
  /** Store (or extend) the copy of what was read for later passes (the job runner's checks). */
  keepCopies = false,
): Promise<PricePassResult> {
  let plan: PriceHistoryPlan | undefined;
  let sink: PriceHistorySink | null = null;
  let newest = Number.NEGATIVE_INFINITY;
  const result = await db
    .transaction(async (tx) => {
      await tx.exec('SET TRANSACTION ISOLATION LEVEL REPEATABLE READ READ ONLY');
      // The plan reads the change log in the same snapshot as the rows: exactly what it saw.
      plan = await planPriceHistory(tx);
      // ~30k series at full scale: one small query, then lookups in memory instead of a join.
      const seriesIds = new Map<string, number>();
      const res = await tx.query<{ item_id: string; store_id: string; series_id: number }>(
        'SELECT item_id, store_id, series_id FROM series',
      );
      for (const r of res.rows) seriesIds.set(`${r.item_id}\u0000${r.store_id}`, r.series_id);
      const pricedWeeks = new Map<number, Int32Array>();
      let rows = 0;
      let groupCount = 0;
      const emit = (itemId: string, storeId: string, weeks: Int32Array, prices: Float64Array, n: number) => {
        const seriesId = seriesIds.get(`${itemId}\u0000${storeId}`) ?? null;
        if (seriesId !== null) pricedWeeks.set(seriesId, weeks.slice(0, n));
        const view: PriceSeriesView = {
          itemId,
          storeId,
          seriesId,
          weeks: weeks.subarray(0, n),
          prices: prices.subarray(0, n),
          n,
        };
        for (const v of visitors) v.call((x) => x.prices(view));
        rows += n;
        groupCount++;
        if (n > 0 && weeks[n - 1]! > newest) newest = weeks[n - 1]!;
      };

      if (plan.usable !== null) {
        let weeks = new Int32Array(1024);
        let prices = new Float64Array(1024);
        await readPriceHistory(tx, plan.usable, cutoff, (itemId, storeId, dv, offset, total) => {
          if (total > weeks.length) {
            weeks = new Int32Array(total * 2);
            prices = new Float64Array(total * 2);
          }
          let n = 0;
          for (let i = 0; i < total; i++) {
            const w = dv.getInt32(offset + 12 * i);
            if (cutoff !== null && w > cutoff) break; // records are in week order
            weeks[n] = w;
            prices[n] = dv.getFloat64(offset + 12 * i + 4);
            n++;
          }
          if (n > 0) emit(itemId, storeId, weeks, prices, n);
        });
        return { rows, groups: groupCount, pricedWeeks };
      }

      if (keepCopies) sink = new PriceHistorySink(db, plan);
      const groups = (
        await tx.query<{ item_id: string; store_id: string; n: number }>(pricesGroupsSql(cutoff))
      ).rows;
      let g = 0;
      let weeks = new Int32Array(Math.max(1, groups[0]?.n ?? 1));
      let prices = new Float64Array(weeks.length);
      let n = 0;
      const next = () => {
        const grp = groups[g]!;
        emit(grp.item_id, grp.store_id, weeks, prices, n);
        (sink as PriceHistorySink | null)?.add(grp.item_id, grp.store_id, weeks, prices, n);
        g++;
        n = 0;
        const size = groups[g]?.n ?? 0;
        if (size > weeks.length) {
          weeks = new Int32Array(size);
          prices = new Float64Array(size);
        }
      };
      for await (const batch of readCopyBinary(tx.copyTo(pricesCopySql(cutoff)), ['date', 'float8'])) {
        const wk = batch.columns[0] as Int32Array;
        const pr = batch.columns[1] as Float64Array;
        for (let i = 0; i < batch.length; i++) {
          if (g >= groups.length) throw new Error('prices changed during the prices pass');
          weeks[n] = wk[i]!;
          prices[n] = pr[i]!;
          n++;
          if (n === groups[g]!.n) next();
        }
      }
      if (g !== groups.length || n !== 0) throw new Error('prices changed during the prices pass');
      return { rows, groups: groupCount, pricedWeeks };
    })
    .catch(async (err) => {
      await (sink as PriceHistorySink | null)?.finish(null).catch(() => {});
      throw err;
    });
  const p = plan!;
  const grew = Number.isFinite(newest) && (p.usable === null || newest > p.usable);
  const s = sink as PriceHistorySink | null;
  const stored = s
    ? await s.finish(grew ? newest : null)
    : grew && keepCopies
      ? await extendPriceHistory(db, p, newest)
      : false;
  return {
    ...result,
    source: {
      historyTo: p.usable === null ? null : formatDay(p.usable),
      reason: p.reason,
      stored,
    },
  };
}
