import type { z } from 'zod';
import { formatDay } from '../core/days.js';
import { checkParams, defineCheck, intAtLeast, positiveNumber, share } from './check-definition.js';
import type { FindingDraft } from './finding.js';
import { MODIFIED_Z_FACTOR, medianAndMad } from './robust-stats.js';
import { unpricedWeeks } from './sold-weeks.js';

export const priceSpikesParams = checkParams(
  ['price-spike', 'non-positive-price', 'week-misaligned', 'missing-price'],
  {
    /** Modified z-score limit (3.5, the usual cut-off for this score). */
    threshold: positiveNumber(3.5),
    /** Trailing weeks forming the baseline (13: a retail quarter; common practice). */
    historyWeeks: intAtLeast(1, 13),
    /**
     * Below this many baseline weeks only the ratio rule applies: a z-score on two or three
     * prices is too unstable to judge (common practice).
     */
    minHistoryWeeks: intAtLeast(1, 4),
    /** Ratio limit used when MAD is 0 (or the history is short): flag p/median > ratio or < 1/ratio. */
    ratio: positiveNumber(3),
    /**
     * Floor of MAD as a share of the median. Shelf prices move in a few discrete steps, so a MAD
     * from them can be tiny and make routine moves look extreme. Measured on the demo chain at
     * three seeds: with no floor, 22% regular price steps (MAD 4% of the price) scored z = 4.05;
     * with a 5% floor, 32%-off promotions (MAD 2%) still scored 4.4, and spike precision was 0.77.
     * At 10% a flag needs a move of 3.5 / 0.6745 x 10% = 52% of the median. Set 0 for the plain
     * modified z-score rule.
     */
    minRelativeMad: share(0.1),
  },
);
export type PriceSpikesParams = z.output<typeof priceSpikesParams>;

// Kept here rather than imported from the config module, which imports the check registry.
const WEEKDAY_NAMES = ['sunday', 'monday', 'tuesday', 'wednesday', 'thursday', 'friday', 'saturday'] as const;

export type SpikeRule = 'modified-z' | 'ratio';

/**
 * Judges one week's price against its baseline prices: the modified z-score
 * 0.6745 |p - median| / MAD (MAD floored at `minRelativeMad` x median) against `threshold` when
 * MAD > 0 and the baseline is long enough, else p / median against [1/ratio, ratio]. Returns
 * null when not a spike.
 */
export function judgePrice(
  price: number,
  baseline: ArrayLike<number>,
  n: number,
  p: Pick<PriceSpikesParams, 'threshold' | 'minHistoryWeeks' | 'ratio' | 'minRelativeMad'>,
  scratch: Float64Array,
): { rule: SpikeRule; observed: number; median: number; mad: number } | null {
  if (n === 0) return null;
  const { median, mad } = medianAndMad(baseline, n, scratch);
  if (mad > 0 && n >= p.minHistoryWeeks) {
    const z = (MODIFIED_Z_FACTOR * Math.abs(price - median)) / Math.max(mad, p.minRelativeMad * median);
    return z > p.threshold ? { rule: 'modified-z', observed: z, median, mad } : null;
  }
  const r = price / median;
  return r > p.ratio || r < 1 / p.ratio ? { rule: 'ratio', observed: r, median, mad } : null;
}

/**
 * True when a price inside its baseline's range [lo, hi] provably passes both rules, so most
 * weeks (the regular price again) skip the two sorts of a median and a MAD. The median lies in
 * [lo, hi], so |p - median| <= hi - lo and p / median lies in [lo / hi, hi / lo]; and the MAD is
 * floored at minRelativeMad x median >= minRelativeMad x lo.
 */
export function withinBaseline(
  price: number,
  lo: number,
  hi: number,
  p: Pick<PriceSpikesParams, 'threshold' | 'ratio' | 'minRelativeMad'>,
): boolean {
  if (price < lo || price > hi || hi > p.ratio * lo) return false;
  if (lo === hi) return true;
  return p.minRelativeMad > 0 && (MODIFIED_Z_FACTOR * (hi - lo)) / (p.minRelativeMad * lo) <= p.threshold;
}

/** Weekly price spikes against the trailing 13 weeks, non-positive prices, misaligned weeks, and sold weeks without a price. */
export const priceSpikes = defineCheck({
  name: 'price-spikes',
  description:
    'price weeks far from the trailing 13-week median (modified z > 3.5, or outside [1/3, 3] when MAD is 0)',
  codes: {
    'price-spike': {
      severity: 'warn',
      meaning: 'a week whose price is far from the item-store trailing median',
    },
    'non-positive-price': { severity: 'block', meaning: 'a price of zero or below' },
    'week-misaligned': {
      severity: 'block',
      meaning: 'price rows whose week_start is not the retail week first day',
    },
    'missing-price': { severity: 'warn', meaning: 'weeks with sales but no price row' },
  },
  params: priceSpikesParams,
  reads: ['prices', 'sales'],
  async run(_db, ctx) {
    const p = ctx.params;
    const drafts: FindingDraft[] = [];
    const span = p.historyWeeks * 7;
    // Sized by days, not weeks: misaligned rows can put more than one price in a week.
    const base = new Float64Array(span + 1);
    const scratch = new Float64Array(span + 1);
    const weekday = WEEKDAY_NAMES[ctx.weekStartsOn]!;
    // Both passes run at once; sold weeks are matched with priced weeks when both are done.
    const sold = new Map<number, Int32Array>();
    const salesDone = ctx.sales({
      series(s) {
        const w = s.soldWeeks();
        if (w.length) sold.set(s.seriesId, w);
      },
    });
    // Sliding minimum and maximum of the baseline's positive prices (monotonic queues of row
    // indices), so the common week is judged by withinBaseline without walking its baseline.
    let minQ = new Int32Array(64);
    let maxQ = new Int32Array(64);
    const priced = await ctx.prices({
      prices(g) {
        const keys = { seriesId: g.seriesId, itemId: g.itemId, storeId: g.storeId };
        let misaligned = 0;
        let firstBad = -1;
        let lo = 0;
        if (g.n > minQ.length) {
          minQ = new Int32Array(g.n);
          maxQ = new Int32Array(g.n);
        }
        let minHead = 0;
        let minTail = 0;
        let maxHead = 0;
        let maxTail = 0;
        let added = 0; // rows [0, added) have entered the queues
        let positive = 0; // positive prices in [lo, added)
        for (let k = 0; k < g.n; k++) {
          const w = g.weeks[k]!;
          const price = g.prices[k]!;
          if (ctx.weekStart(w) !== w) {
            misaligned++;
            if (firstBad < 0) firstBad = w;
          }
          if (!(price > 0)) {
            drafts.push({
              code: 'non-positive-price',
              ...keys,
              weekStart: w,
              firstDay: w,
              lastDay: w + 6,
              observed: price,
              threshold: 0,
              rank: -price,
              details: { price },
              message: `price ${price} in the week of ${formatDay(w)}`,
            });
            continue;
          }
          for (; added < k; added++) {
            const v = g.prices[added]!;
            if (!(v > 0)) continue;
            positive++;
            while (minTail > minHead && g.prices[minQ[minTail - 1]!]! >= v) minTail--;
            minQ[minTail++] = added;
            while (maxTail > maxHead && g.prices[maxQ[maxTail - 1]!]! <= v) maxTail--;
            maxQ[maxTail++] = added;
          }
          while (g.weeks[lo]! < w - span) {
            if (g.prices[lo]! > 0) positive--;
            lo++;
          }
          while (minHead < minTail && minQ[minHead]! < lo) minHead++;
          while (maxHead < maxTail && maxQ[maxHead]! < lo) maxHead++;
          if (positive > 0) {
            const bLo = g.prices[minQ[minHead]!]!;
            const bHi = g.prices[maxQ[maxHead]!]!;
            if (withinBaseline(price, bLo, bHi, p)) continue;
          }
          let n = 0;
          for (let j = lo; j < k; j++) {
            const v = g.prices[j]!;
            if (v > 0) base[n++] = v;
          }
          const spike = judgePrice(price, base, n, p, scratch);
          if (!spike) continue;
          const ratio = price / spike.median;
          drafts.push({
            code: 'price-spike',
            ...keys,
            weekStart: w,
            firstDay: w,
            lastDay: w + 6,
            observed: spike.observed,
            threshold: spike.rule === 'modified-z' ? p.threshold : p.ratio,
            rank: Math.abs(Math.log(ratio)),
            details: { price, median: spike.median, mad: spike.mad, ratio, history_weeks: n },
            message:
              spike.rule === 'modified-z'
                ? `price ${price} in the week of ${formatDay(w)} against a ${n}-week median of ${spike.median} (modified z ${spike.observed.toFixed(1)})`
                : `price ${price} in the week of ${formatDay(w)} is ${ratio.toFixed(2)}x the ${n}-week median of ${spike.median}`,
          });
        }
        if (misaligned > 0) {
          drafts.push({
            code: 'week-misaligned',
            ...keys,
            firstDay: firstBad,
            lastDay: firstBad,
            observed: misaligned,
            threshold: 0,
            rank: misaligned,
            details: { weeks: misaligned, weekday },
            message: `${misaligned} price row(s) with a week_start that is not a ${weekday} (first ${formatDay(firstBad)})`,
          });
        }
      },
    });
    await salesDone;
    for (const [seriesId, weeks] of sold) {
      const c = unpricedWeeks(weeks, priced.pricedWeeks.get(seriesId));
      if (c.unpriced === 0) continue;
      drafts.push({
        code: 'missing-price',
        seriesId,
        firstDay: c.firstUnpriced,
        lastDay: c.lastUnpriced + 6,
        observed: c.unpriced,
        threshold: 0,
        rank: c.unpriced,
        details: { weeks: c.unpriced, sold_weeks: c.sold },
        message: `${c.unpriced} of ${c.sold} sold week(s) have no price (first ${formatDay(c.firstUnpriced)}, last ${formatDay(c.lastUnpriced)})`,
      });
    }
    await ctx.write(drafts);
  },
});
