import { formatDay } from '../core/days.js';
import { readCopyBinary } from '../db/binary-copy.js';
import type { DbSession } from '../db/database.js';
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
}

export function pricesCopySql(cutoff: number | null): string {
  const where = cutoff === null ? '' : ` WHERE week_start <= DATE '${formatDay(cutoff)}'`;
  // The primary key's order, so PostgreSQL reads it by index without sorting.
  return (
    'COPY (SELECT item_id, store_id, week_start, price::float8 FROM prices' +
    `${where} ORDER BY item_id, store_id, week_start) TO STDOUT (FORMAT binary)`
  );
}

/** Streams prices once in key order, grouping rows by item and store for the visitors. */
export async function runPricePass(
  db: DbSession,
  cutoff: number | null,
  visitors: ReadonlyArray<Guarded<PriceVisitor>>,
): Promise<PricePassResult> {
  // ~30k series at full scale: one small query, then lookups in memory instead of a join.
  const seriesIds = new Map<string, number>();
  const res = await db.query<{ item_id: string; store_id: string; series_id: number }>(
    'SELECT item_id, store_id, series_id FROM series',
  );
  for (const r of res.rows) seriesIds.set(`${r.item_id}\u0000${r.store_id}`, r.series_id);

  const pricedWeeks = new Map<number, Int32Array>();
  let weeks = new Int32Array(1024);
  let prices = new Float64Array(1024);
  let n = 0;
  let item = '';
  let store = '';
  let rows = 0;
  let groups = 0;

  const emit = () => {
    if (n === 0) return;
    groups++;
    const seriesId = seriesIds.get(`${item}\u0000${store}`) ?? null;
    if (seriesId !== null) pricedWeeks.set(seriesId, weeks.slice(0, n));
    const view: PriceSeriesView = {
      itemId: item,
      storeId: store,
      seriesId,
      weeks: weeks.subarray(0, n),
      prices: prices.subarray(0, n),
      n,
    };
    for (const v of visitors) v.call((x) => x.prices(view));
  };

  const types = ['text', 'text', 'date', 'float8'] as const;
  for await (const batch of readCopyBinary(db.copyTo(pricesCopySql(cutoff)), types)) {
    const it = batch.columns[0] as string[];
    const st = batch.columns[1] as string[];
    const wk = batch.columns[2] as Int32Array;
    const pr = batch.columns[3] as Float64Array;
    rows += batch.length;
    for (let i = 0; i < batch.length; i++) {
      if (it[i] !== item || st[i] !== store) {
        emit();
        item = it[i]!;
        store = st[i]!;
        n = 0;
      }
      if (n === weeks.length) {
        const w2 = new Int32Array(n * 2);
        w2.set(weeks);
        weeks = w2;
        const p2 = new Float64Array(n * 2);
        p2.set(prices);
        prices = p2;
      }
      weeks[n] = wk[i]!;
      prices[n] = pr[i]!;
      n++;
    }
  }
  emit();
  return { rows, groups, pricedWeeks };
}
