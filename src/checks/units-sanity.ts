import type { z } from 'zod';
import { formatDay } from '../core/days.js';
import { checkParams, defineCheck, intAtLeast, positiveNumber } from './check-definition.js';
import type { FindingDraft } from './finding.js';
import { MODIFIED_Z_FACTOR, medianAndMad, medianInPlace } from './robust-stats.js';

export const unitsSanityParams = checkParams(['negative-units', 'units-spike'], {
  /** Modified z-score above which a single day is a spike (10: far past the 3.5 outlier cut-off, as promotions are routine; common practice). */
  spikeThreshold: positiveNumber(10),
  /** Trailing days the spike is judged against. */
  window: intAtLeast(7, 28),
  /** Fewer stored days than this in the window: the day is not judged. */
  minHistory: intAtLeast(3, 14),
  /**
   * Floor of the scale (units) the deviation is divided by, so a constant window (MAD 0) does
   * not make every change a spike. One unit: counts cannot deviate by less (common practice).
   */
  minScale: positiveNumber(1),
});
export type UnitsSanityParams = z.output<typeof unitsSanityParams>;

/** 1.253314 = sqrt(pi/2): mean absolute deviation to sigma under normality, the fallback when MAD is 0. */
const MEAN_AD_FACTOR = 1.253314;

/** A day's spike score against its trailing window, with the median and MAD used. */
export interface SpikeScore {
  readonly z: number;
  readonly median: number;
  readonly mad: number;
}

/**
 * Modified z-score of `x` against `window[0..n)`: 0.6745 (x - median) / MAD; when MAD is 0 the
 * scale falls back to 1.253314 x mean absolute deviation, and it never drops below `minScale`.
 */
export function spikeScore(
  x: number,
  window: ArrayLike<number>,
  n: number,
  minScale: number,
  scratch: Float64Array,
): SpikeScore {
  const { median, mad } = medianAndMad(window, n, scratch);
  let scale = mad / MODIFIED_Z_FACTOR;
  if (mad === 0) {
    let s = 0;
    for (let i = 0; i < n; i++) s += Math.abs((window[i] as number) - median);
    scale = (MEAN_AD_FACTOR * s) / n;
  }
  return { z: (x - median) / Math.max(scale, minScale), median, mad };
}

/** A day of a series whose modified z against its trailing window is above the threshold. */
export interface UnitsSpike {
  /** Index in the series array. */
  readonly day: number;
  readonly score: SpikeScore;
}

const NO_SPIKES: readonly UnitsSpike[] = Object.freeze([]);

/**
 * Days of a dense daily series (NaN = no row) whose `spikeScore` against the stored days among
 * the previous `window` days exceeds `spikeThreshold`, judged once at least `minHistory` of them
 * are stored. `win` and `scratch` are work space of at least `window` values.
 *
 * Cheap bounds rule out almost every day before a median is computed. Running count, sum and
 * sum of squares of the window give the mean and sigma; since the median lies within one sigma
 * of the mean, x <= mean - sigma + T x minScale cannot be a spike. A spike needs
 * x - median > T x minScale, and counting the window days v with x - v > T x minScale settles
 * that without sorting: x - v falls as v grows, so the median passes when more than half of the
 * days do and fails when fewer than half do; only an even window split exactly in half needs
 * the median itself. The few days left get the exact median and MAD.
 */
export function unitsSpikes(
  u: ArrayLike<number>,
  p: Pick<UnitsSanityParams, 'spikeThreshold' | 'window' | 'minHistory' | 'minScale'>,
  win: Float64Array,
  scratch: Float64Array,
): readonly UnitsSpike[] {
  const n = u.length;
  const w = p.window;
  const limit = p.spikeThreshold * p.minScale;
  let out: UnitsSpike[] | undefined;
  let cnt = 0;
  let sum = 0;
  let sumSq = 0;
  for (let d = 0; d < n; d++) {
    if (d > 0) {
      const add = u[d - 1] as number;
      if (!Number.isNaN(add)) {
        cnt++;
        sum += add;
        sumSq += add * add;
      }
      if (d - 1 - w >= 0) {
        const rem = u[d - 1 - w] as number;
        if (!Number.isNaN(rem)) {
          cnt--;
          sum -= rem;
          sumSq -= rem * rem;
        }
      }
    }
    const x = u[d] as number;
    if (Number.isNaN(x) || cnt < p.minHistory) continue;
    const mean = sum / cnt;
    const sd = Math.sqrt(Math.max(0, sumSq / cnt - mean * mean));
    if (x <= mean - sd + limit) continue;
    const from = Math.max(0, d - w);
    let below = 0;
    for (let j = from; j < d; j++) if (x - (u[j] as number) > limit) below++; // NaN compares false
    const half = cnt >> 1;
    if (below < half || (cnt % 2 === 1 && below === half)) continue;
    let m = 0;
    for (let j = from; j < d; j++) {
      const v = u[j] as number;
      if (!Number.isNaN(v)) win[m++] = v;
    }
    if (below === half) {
      for (let j = 0; j < m; j++) scratch[j] = win[j]!;
      if (x - medianInPlace(scratch, m) <= limit) continue;
    }
    const score = spikeScore(x, win, m, p.minScale, scratch);
    if (!(score.z > p.spikeThreshold)) continue;
    out ??= [];
    out.push({ day: d, score });
  }
  return out ?? NO_SPIKES;
}

/** Negative units (block) and single-day spikes against the trailing weeks (info: may be a promotion). */
export const unitsSanity = defineCheck({
  name: 'units-sanity',
  description: 'negative units, and single-day spikes with modified z above 10 against the trailing 28 days',
  codes: {
    'negative-units': {
      severity: 'block',
      meaning: 'days with negative units (returns above sales, or bad data)',
    },
    'units-spike': {
      severity: 'info',
      meaning: 'a day far above its trailing window: a promotion or an error',
    },
  },
  params: unitsSanityParams,
  reads: ['sales'],
  async run(_db, ctx) {
    const p = ctx.params;
    const drafts: FindingDraft[] = [];
    const win = new Float64Array(p.window);
    const scratch = new Float64Array(p.window);
    await ctx.sales({
      series(s) {
        const u = s.units;
        const n = u.length;
        // Negative runs: consecutive stored days below zero.
        let i = 0;
        while (i < n) {
          if (!(u[i]! < 0)) {
            i++;
            continue;
          }
          const start = i;
          let min = 0;
          while (i < n && u[i]! < 0) min = Math.min(min, u[i++]!);
          const days = i - start;
          drafts.push({
            code: 'negative-units',
            seriesId: s.seriesId,
            firstDay: s.firstDay + start,
            lastDay: s.firstDay + i - 1,
            observed: min,
            threshold: 0,
            rank: -min * days,
            details: { days, min_units: min },
            message:
              days === 1
                ? `${min} units on ${formatDay(s.firstDay + start)}`
                : `negative units on ${days} days ${formatDay(s.firstDay + start)}..${formatDay(s.firstDay + i - 1)} (lowest ${min})`,
          });
        }
        for (const sp of unitsSpikes(u, p, win, scratch)) {
          const x = u[sp.day]!;
          const d = sp.day;
          const score = sp.score;
          drafts.push({
            code: 'units-spike',
            seriesId: s.seriesId,
            firstDay: s.firstDay + d,
            lastDay: s.firstDay + d,
            observed: score.z,
            threshold: p.spikeThreshold,
            rank: score.z,
            details: { units: x, median: score.median, mad: score.mad },
            message: `${x} units on ${formatDay(s.firstDay + d)} against a median of ${score.median} (modified z ${score.z.toFixed(1)})`,
          });
        }
      },
    });
    await ctx.write(drafts);
  },
});
