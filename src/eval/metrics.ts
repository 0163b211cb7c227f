/**
 * Scaled forecast-accuracy measures over plain arrays (no I/O).
 *
 * RMSSE and WRMSSE: Makridakis, Spiliotis & Assimakopoulos, International Journal of
 * Forecasting 38(4), 2022. The scale is the in-sample mean squared one-step naive error, taken
 * over the periods from the series' first non-zero demand on (leading zeros dropped, later zeros
 * kept).
 *
 * MASE: Hyndman & Koehler, "Another look at measures of forecast accuracy", International Journal
 * of Forecasting 22, 2006: the in-sample mean absolute (seasonal) naive error as the scale.
 */

export interface ScaleOptions {
  /** Drop the leading zeros before the first sale (default true, as RMSSE prescribes). */
  readonly trimLeadingZeros?: boolean;
  /** Seasonal lag of the naive forecast in the denominator (default 1). */
  readonly lag?: number;
}

export type ScaleStatus = 'ok' | 'no_sale' | 'one_day' | 'flat';

export interface Scale {
  /** The denominator, or NaN when the status is `no_sale` or `one_day`. */
  readonly scale: number;
  readonly status: ScaleStatus;
  /** Index of the first period used (the first sale when trimming); -1 when there is none. */
  readonly first: number;
  /** Periods used, from `first` to the end. */
  readonly n: number;
}

/** Index of the first value > 0, or -1. A "sale" is a positive quantity; returns are not sales. */
export function firstSaleIndex(y: ArrayLike<number>): number {
  for (let i = 0; i < y.length; i++) if (y[i]! > 0) return i;
  return -1;
}

function scaleOf(y: ArrayLike<number>, opts: ScaleOptions, term: (d: number) => number): Scale {
  const lag = opts.lag ?? 1;
  const first = (opts.trimLeadingZeros ?? true) ? firstSaleIndex(y) : y.length > 0 ? 0 : -1;
  if (first < 0) return { scale: Number.NaN, status: 'no_sale', first: -1, n: 0 };
  const n = y.length - first;
  if (n <= lag) return { scale: Number.NaN, status: 'one_day', first, n };
  let sum = 0;
  for (let t = first + lag; t < y.length; t++) sum += term(y[t]! - y[t - lag]!);
  const scale = sum / (n - lag);
  return { scale, status: scale === 0 ? 'flat' : 'ok', first, n };
}

/** RMSSE denominator: mean squared `lag`-step difference of the in-sample series. */
export function rmsseScale(y: ArrayLike<number>, opts: ScaleOptions = {}): Scale {
  return scaleOf(y, opts, (d) => d * d);
}

/** MASE denominator: mean absolute `lag`-step difference. Hyndman & Koehler use the whole sample. */
export function maseScale(y: ArrayLike<number>, opts: ScaleOptions = {}): Scale {
  return scaleOf(y, { trimLeadingZeros: false, ...opts }, Math.abs);
}

function checkLengths(actual: ArrayLike<number>, forecast: ArrayLike<number>): void {
  if (actual.length !== forecast.length || actual.length === 0) {
    throw new RangeError(
      `actual (${actual.length}) and forecast (${forecast.length}) need the same non-zero length`,
    );
  }
}

/** Root mean squared scaled error of one forecast; NaN when the scale is missing or zero. */
export function rmsse(actual: ArrayLike<number>, forecast: ArrayLike<number>, scale: number): number {
  checkLengths(actual, forecast);
  if (!(scale > 0)) return Number.NaN;
  let sum = 0;
  for (let i = 0; i < actual.length; i++) {
    const e = actual[i]! - forecast[i]!;
    sum += e * e;
  }
  return Math.sqrt(sum / actual.length / scale);
}

/** Mean absolute scaled error of one forecast; NaN when the scale is missing or zero. */
export function mase(actual: ArrayLike<number>, forecast: ArrayLike<number>, scale: number): number {
  checkLengths(actual, forecast);
  if (!(scale > 0)) return Number.NaN;
  let sum = 0;
  for (let i = 0; i < actual.length; i++) sum += Math.abs(actual[i]! - forecast[i]!);
  return sum / actual.length / scale;
}

/**
 * Dollar sales normalised to weights summing to 1; null when the dollars add up to zero (the
 * level is then reported, never divided by zero). Negative entries count as zero.
 */
export function levelWeights(dollars: ArrayLike<number>): Float64Array | null {
  let total = 0;
  for (let i = 0; i < dollars.length; i++) total += Math.max(0, dollars[i]!);
  if (!(total > 0)) return null;
  const w = new Float64Array(dollars.length);
  for (let i = 0; i < dollars.length; i++) w[i] = Math.max(0, dollars[i]!) / total;
  return w;
}

export interface LevelScore {
  /** Sum of weight x RMSSE over the series that have both; NaN when none has. */
  readonly score: number;
  /** Series left out because their RMSSE or weight is undefined. */
  readonly excluded: number;
  /** Total weight of the left-out series. */
  readonly excludedWeight: number;
}

/** One level's weighted RMSSE. Series with an undefined RMSSE (no scale) are left out and counted. */
export function weightedLevelScore(rmsses: ArrayLike<number>, weights: ArrayLike<number> | null): LevelScore {
  if (weights === null) return { score: Number.NaN, excluded: rmsses.length, excludedWeight: 0 };
  if (weights.length !== rmsses.length) throw new RangeError('one weight per series is needed');
  let score = 0;
  let used = 0;
  let excluded = 0;
  let excludedWeight = 0;
  for (let i = 0; i < rmsses.length; i++) {
    const r = rmsses[i]!;
    const w = weights[i]!;
    if (Number.isNaN(r) || Number.isNaN(w)) {
      excluded++;
      if (!Number.isNaN(w)) excludedWeight += w;
      continue;
    }
    score += w * r;
    used++;
  }
  return { score: used > 0 ? score : Number.NaN, excluded, excludedWeight };
}

/** WRMSSE: the mean of the level scores, every level weighing the same; NaN if any level is NaN. */
export function wrmsse(levelScores: readonly number[]): number {
  if (levelScores.length === 0) return Number.NaN;
  let sum = 0;
  for (const s of levelScores) sum += s;
  return sum / levelScores.length;
}
