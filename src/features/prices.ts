import { z } from 'zod';
import { isoWeekday } from '../core/days.js';
import { defineFamily, type FeatureColumn, type ItemPrices, NO_NEEDS } from './family.js';

export const PRICE_FEATURES = [
  'price',
  'price_max',
  'price_min',
  'price_mean',
  'price_std',
  'price_rel_max',
  'price_distinct',
  'price_momentum_1w',
  'price_momentum_4w',
  'price_momentum_52w',
  'dept_same_price',
  'price_rel_dept',
] as const;
export type PriceFeature = (typeof PRICE_FEATURES)[number];

const DESCRIPTIONS: Record<PriceFeature, string> = {
  price: 'price of the item in the store for the price week of the target day',
  price_max: 'maximum of the item-store price over all weeks up to the price week',
  price_min: 'minimum of the item-store price over all weeks up to the price week',
  price_mean: 'mean of the item-store price over all weeks up to the price week',
  price_std: 'sample standard deviation of the item-store price over all weeks up to the price week',
  price_rel_max: 'price divided by its maximum so far',
  price_distinct: 'number of distinct prices of the item in the store so far',
  price_momentum_1w: "price divided by the previous week's price",
  price_momentum_4w: 'price divided by the mean price of the 4 weeks ending with the price week',
  price_momentum_52w: 'price divided by the mean price of the 52 weeks ending with the price week',
  dept_same_price:
    "number of items of the store's department with the same price that week (itself included)",
  price_rel_dept: "price divided by the mean price of the store's department that week",
};

export const pricesParamsSchema = z
  .object({
    features: z
      .array(z.enum(PRICE_FEATURES))
      .min(1)
      .default([...PRICE_FEATURES]),
  })
  .strict();
export type PricesParams = z.infer<typeof pricesParamsSchema>;

/** A price in ten-thousandths: exact for the 4 decimals prices carry (DESIGN.md data contracts). */
export function priceTicks(price: number): number {
  return Math.round(price * 10000);
}

/** First day of the retail week holding `day`, weeks starting on `weekStart` (0 = Sunday). */
export function weekStartOf(day: number, weekStart: number): number {
  const dow = isoWeekday(day) % 7;
  return day - ((dow - weekStart + 7) % 7);
}

/** Per price row of one item: every price feature as of that week. */
export interface PriceRowStats {
  readonly values: ReadonlyMap<PriceFeature, Float64Array>;
}

/**
 * Price features for each weekly price row of one item (rows ascending, all within the price
 * boundary): expanding statistics over rows 0..i, momentum against earlier weeks, and the
 * department's prices in the same week.
 */
export function priceRowStats(
  item: ItemPrices,
  dept: ReadonlyMap<number, ReadonlyMap<number, number>> | null,
  deptMean: (week: number) => number,
  features: readonly PriceFeature[] = PRICE_FEATURES,
): PriceRowStats {
  const out = features.map(() => new Float64Array(item.weeks.length));
  fillPriceRows(item, dept, deptMean, features, out);
  return { values: new Map(features.map((f, k) => [f, out[k]!])) };
}

const FEATURE_INDEX = new Map(PRICE_FEATURES.map((f, i) => [f, i]));

/**
 * Fills `out[k][i]` with `features[k]` as of price row i, for the rows i >= `from` (the running
 * statistics still pass over every row; the rows before `from` are left as they were). Only the
 * requested features are computed (a build asks for a few of the twelve, for every item of
 * every store); `from` spares a refresh, which needs the last week or two, the department
 * lookups and ratios of all the others.
 */
function fillPriceRows(
  item: ItemPrices,
  dept: ReadonlyMap<number, ReadonlyMap<number, number>> | null,
  deptMean: (week: number) => number,
  features: readonly PriceFeature[],
  out: readonly Float64Array[],
  from = 0,
): void {
  const { weeks, prices } = item;
  const n = weeks.length;
  // Column of each feature (or undefined when not asked for), by the feature's fixed position.
  const col: Array<Float64Array | undefined> = new Array(PRICE_FEATURES.length);
  features.forEach((f, k) => {
    col[FEATURE_INDEX.get(f)!] = out[k]!;
  });
  const [cPrice, cMax, cMin, cMean, cStd, cRelMax, cDistinct, cM1, cM4, cM52, cSame, cRelDept] = col;
  const wantWelford = cMean !== undefined || cStd !== undefined;
  const wantDept = cSame !== undefined || cRelDept !== undefined;
  let max = -Infinity;
  let min = Infinity;
  // Welford: prices are decimals, so running sums of squares would cancel for steady prices.
  let mean = 0;
  let m2 = 0;
  // Keys in ten-thousandths (prices have at most 4 decimals): small integers hash fast.
  const seen = cDistinct ? new Set<number>() : null;
  let lo4 = 0;
  let lo52 = 0;
  // Prices carry at most 4 decimals: sums of ten-thousandths are exact integers, so the
  // trailing means slide in O(1) without drift.
  const ticks = priceTicks;
  let sum4 = 0;
  let sum52 = 0;
  for (let i = 0; i < n; i++) {
    const p = prices[i]!;
    const wk = weeks[i]!;
    if (p > max) max = p;
    if (p < min) min = p;
    if (wantWelford) {
      const d = p - mean;
      mean += d / (i + 1);
      m2 += d * (p - mean);
    }
    const tp = ticks(p);
    if (seen) seen.add(tp);
    if (cM4) {
      sum4 += tp;
      while (weeks[lo4]! < wk - 21) sum4 -= ticks(prices[lo4++]!);
    }
    if (cM52) {
      sum52 += tp;
      while (weeks[lo52]! < wk - 357) sum52 -= ticks(prices[lo52++]!);
    }
    if (i < from) continue;
    if (cPrice) cPrice[i] = p;
    if (cMax) cMax[i] = max;
    if (cMin) cMin[i] = min;
    if (cMean) cMean[i] = mean;
    if (cStd) cStd[i] = i > 0 ? Math.sqrt(m2 / i) : Number.NaN;
    if (cRelMax) cRelMax[i] = p / max;
    if (cDistinct) cDistinct[i] = seen!.size;
    if (cM1) cM1[i] = i > 0 && weeks[i - 1] === wk - 7 ? p / prices[i - 1]! : Number.NaN;
    if (cM4) cM4[i] = p / (sum4 / 10000 / (i - lo4 + 1));
    if (cM52) cM52[i] = p / (sum52 / 10000 / (i - lo52 + 1));
    if (wantDept) {
      const atWeek = dept?.get(wk);
      if (cSame) cSame[i] = atWeek ? (atWeek.get(tp) ?? 0) : Number.NaN;
      if (cRelDept) cRelDept[i] = atWeek ? p / deptMean(wk) : Number.NaN;
    }
  }
}

// Per-feature buffers of price rows and the row index of each target day, reused from series
// to series (compute copies out of them before it returns).
const rowBufs: Float64Array[] = [];
let idxBuf = new Int32Array(0);
function rowBuf(k: number, n: number): Float64Array {
  let b = rowBufs[k];
  if (!b || b.length < n) rowBufs[k] = b = new Float64Array(Math.max(n, 2 * (b?.length ?? 0)));
  return b;
}

/** Mean price of each department's items per week, from the price counts. */
export function departmentMeans(
  deptPrices: ReadonlyMap<string, ReadonlyMap<number, ReadonlyMap<number, number>>>,
): Map<string, Map<number, number>> {
  const out = new Map<string, Map<number, number>>();
  for (const [dept, byWeek] of deptPrices) {
    const means = new Map<number, number>();
    for (const [week, counts] of byWeek) {
      let s = 0;
      let c = 0;
      for (const [t, k] of counts) {
        s += t * k;
        c += k;
      }
      means.set(week, s / c / 10000);
    }
    out.set(dept, means);
  }
  return out;
}

/** Index of the price row a target day uses, or -1: its own week within the price boundary, else the last known. */
export function priceRowFor(weeks: Int32Array, day: number, weekStart: number, boundary: number): number {
  const ws = weekStartOf(day, weekStart);
  if (ws > boundary) {
    // Past the price boundary: the last price known at the boundary (weeks are all within it).
    return weeks.length - 1;
  }
  let lo = 0;
  let hi = weeks.length - 1;
  while (lo <= hi) {
    const mid = (lo + hi) >> 1;
    const w = weeks[mid]!;
    if (w === ws) return mid;
    if (w < ws) lo = mid + 1;
    else hi = mid - 1;
  }
  return -1;
}

/**
 * Prices of the target day's retail week, within the price boundary (DESIGN.md rule 2: weeks
 * starting on or before C, or C + H when prices are known ahead). Past the boundary the last
 * known row is carried; a week inside the boundary without a price row is NULL.
 */
export const prices = defineFamily<PricesParams>({
  name: 'prices',
  params: pricesParamsSchema,
  columns(p) {
    return p.features.map(
      (f): FeatureColumn => ({
        name: f,
        family: 'prices',
        description: DESCRIPTIONS[f],
        source: 'prices',
        shift: 0,
      }),
    );
  },
  needs() {
    return { ...NO_NEEDS, prices: true };
  },
  compute(p, _set, s, env, out) {
    const { rows } = s;
    const item = env.prices?.get(s.itemId);
    if (!item || item.weeks.length === 0) {
      for (const col of out) col.fill(Number.NaN, 0, rows.n);
      return;
    }
    const deptId = env.departmentOf?.get(s.itemId) ?? null;
    const dept = deptId === null ? null : (env.deptPrices?.get(deptId) ?? null);
    const means = deptId === null ? undefined : env.deptMeans?.get(deptId);
    if (idxBuf.length < rows.n) idxBuf = new Int32Array(Math.max(rows.n, 2 * idxBuf.length));
    const idx = idxBuf;
    // Rows come in day order (per origin in origin mode): walk the weeks alongside, as
    // `priceRowFor` would find them, and start over where the days go back.
    const weeks = item.weeks;
    const last = weeks.length - 1;
    const day = rows.day;
    let j = 0;
    let prev = -2147483648;
    let first = last + 1;
    for (let r = 0; r < rows.n; r++) {
      const ws = weekStartOf(day[r]!, env.weekStart);
      if (ws > env.priceBoundary) {
        idx[r] = last;
        if (last < first) first = last;
        continue;
      }
      if (ws < prev) j = 0;
      prev = ws;
      while (j <= last && weeks[j]! < ws) j++;
      idx[r] = j <= last && weeks[j] === ws ? j : -1;
      if (idx[r]! >= 0 && idx[r]! < first) first = idx[r]!;
    }
    // Only the price rows from the first one a target day uses are read below.
    const bufs = p.features.map((_, k) => rowBuf(k, item.weeks.length));
    fillPriceRows(item, dept, (wk) => means?.get(wk) ?? Number.NaN, p.features, bufs, first);
    for (let c = 0; c < p.features.length; c++) {
      const src = bufs[c]!;
      const col = out[c]!;
      for (let r = 0; r < rows.n; r++) col[r] = idx[r]! >= 0 ? src[idx[r]!]! : Number.NaN;
    }
  },
});
