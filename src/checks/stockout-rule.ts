/**
 * The stock-out rule (DESIGN.md, "Stock-out zeros"), as a pure function over one series so the
 * check, the feature build's mask and the audit all use the same code.
 *
 * Over the `lookback` days before a zero run (missing days and days of runs already flagged
 * excluded) estimate the zero-day chance p0: with mean mu and sample variance s2, a negative
 * binomial by moments when s2 > mu (r = mu^2/(s2 - mu), p0 = (r/(r + mu))^r), else Poisson
 * (p0 = e^-mu). A run of k zeros has chance p0^k; it is a stock-out from k* = ceil(ln a / ln p0).
 */
export interface StockoutParams {
  /** Per-run false-alarm level; 1e-6 by default because a chain tests hundreds of thousands of runs. */
  readonly alpha: number;
  /** Days before the run used to estimate the rate. */
  readonly lookback: number;
  /** Fewer valid days than this in the lookback: no estimate, the run is not judged. */
  readonly minHistory: number;
}

export const DEFAULT_STOCKOUT_PARAMS: StockoutParams = Object.freeze({
  alpha: 1e-6,
  lookback: 56,
  minHistory: 14,
});

export type ZeroRunKind = 'stockout' | 'plausible' | 'pre-launch' | 'open' | 'unjudged';

export interface ZeroRun {
  /** Index of the first zero day in the input array. */
  readonly start: number;
  /** Index of the last zero day (inclusive). */
  readonly end: number;
  readonly kind: ZeroRunKind;
  readonly mean: number;
  readonly variance: number;
  readonly p0: number;
  /** Run length from which the run is improbable; Infinity when p0 is 1 or unknown. */
  readonly kStar: number;
  /** Index of the day the run became detectable (start + k* - 1), or -1 if it never did. */
  readonly detectable: number;
}

/** Zero-day probability of a count with mean `mu` and variance `s2` (negative binomial or Poisson). */
export function zeroProbability(mu: number, s2: number): number {
  if (!(mu > 0)) return 1;
  if (s2 > mu) {
    const r = (mu * mu) / (s2 - mu);
    // (r / (r + mu))^r = exp(-r ln(1 + mu / r)), written with log1p: when s2 is barely above mu,
    // r is huge and the plain power loses every digit (it must tend to the Poisson e^-mu).
    return Math.exp(-r * Math.log1p(mu / r));
  }
  return Math.exp(-mu);
}

/** Smallest run length k with p0^k at or below alpha: ceil(ln alpha / ln p0). */
export function criticalRunLength(p0: number, alpha: number): number {
  if (!(p0 < 1) || !(p0 >= 0)) return Number.POSITIVE_INFINITY;
  if (p0 === 0) return 1;
  // The epsilon keeps a ratio that is an integer in exact arithmetic from rounding up a step.
  return Math.max(1, Math.ceil(Math.log(alpha) / Math.log(p0) - 1e-9));
}

/**
 * Classifies every run of zeros in `units`, a dense daily array of one series (index = day
 * offset, NaN = no row that day). Runs still open at the last index are `open`; zeros before
 * the first positive sale are `pre-launch`; neither is a stock-out. Days before the first sale
 * never count as history: a launch would otherwise read as a low rate.
 *
 * One pass with a sliding window of running sums, O(n) per series whatever the number of runs
 * (slow sellers have hundreds).
 */
export function classifyZeroRuns(
  units: ArrayLike<number>,
  params: StockoutParams = DEFAULT_STOCKOUT_PARAMS,
): ZeroRun[] {
  return scanZeroRuns(units, params, true);
}

/**
 * The runs the stock-out check reports: `classifyZeroRuns(units, params)` keeping only the
 * stock-outs and the open runs already past k*, in the same order with the same values. Faster
 * on slow sellers' hundreds of short runs: a run of `k` zeros after mean `mu` cannot reach k*
 * when k mu < 0.99 (-ln alpha), since the zero chance is at least the Poisson e^-mu (the
 * negative binomial's (r/(r+mu))^r = e^(-r ln(1 + mu/r)) and ln(1 + x) <= x), so p0^k > alpha^0.99.
 * Such runs are passed over without computing p0 or k*.
 */
export function reportedZeroRuns(
  units: ArrayLike<number>,
  params: StockoutParams = DEFAULT_STOCKOUT_PARAMS,
): ZeroRun[] {
  return scanZeroRuns(units, params, false);
}

function scanZeroRuns(units: ArrayLike<number>, params: StockoutParams, all: boolean): ZeroRun[] {
  const n = units.length;
  const runs: ZeroRun[] = [];
  const { alpha, lookback, minHistory } = params;
  // k x mu below this: the run cannot reach k* (see reportedZeroRuns); the 1% covers rounding.
  const unreachable = -0.99 * Math.log(alpha);
  let firstSale = -1;
  for (let i = 0; i < n; i++) {
    if ((units[i] as number) > 0) {
      firstSale = i;
      break;
    }
  }
  // Window [lo, hi) of history days, starting at the first sale; a day counts when stored and
  // not in a flagged run.
  const flagged = new Uint8Array(n);
  let lo = Math.max(firstSale, 0);
  let hi = lo;
  let cnt = 0;
  let sum = 0;
  let sumSq = 0;

  let i = 0;
  while (i < n) {
    if (units[i] !== 0) {
      i++;
      continue;
    }
    const start = i;
    while (i < n && units[i] === 0) i++;
    const end = i - 1;
    if (firstSale < 0 || start < firstSale) {
      if (!all) continue;
      runs.push(
        run(start, end, 'pre-launch', Number.NaN, Number.NaN, Number.NaN, Number.POSITIVE_INFINITY, -1),
      );
      continue;
    }
    for (; hi < start; hi++) {
      const v = units[hi] as number;
      if (flagged[hi] || Number.isNaN(v)) continue;
      cnt++;
      sum += v;
      sumSq += v * v;
    }
    for (const stop = start - lookback; lo < stop; lo++) {
      const v = units[lo] as number;
      if (flagged[lo] || Number.isNaN(v)) continue;
      cnt--;
      sum -= v;
      sumSq -= v * v;
    }
    const open = end === n - 1;
    if (cnt < minHistory) {
      if (!all) continue;
      runs.push(
        run(
          start,
          end,
          open ? 'open' : 'unjudged',
          Number.NaN,
          Number.NaN,
          Number.NaN,
          Number.POSITIVE_INFINITY,
          -1,
        ),
      );
      continue;
    }
    const mean = sum / cnt;
    if (!all && (end - start + 1) * mean < unreachable) continue;
    // Sample variance; sums of integer units are exact in doubles, so no drift from sliding.
    const variance = cnt > 1 ? Math.max(0, (sumSq - (sum * sum) / cnt) / (cnt - 1)) : 0;
    const p0 = zeroProbability(mean, variance);
    const kStar = criticalRunLength(p0, alpha);
    const reached = end - start + 1 >= kStar;
    const kind: ZeroRunKind = open ? 'open' : reached ? 'stockout' : 'plausible';
    // Flagged before the window reaches these days, so they never enter later runs' history.
    if (kind === 'stockout') flagged.fill(1, start, end + 1);
    if (all || reached)
      runs.push(run(start, end, kind, mean, variance, p0, kStar, reached ? start + kStar - 1 : -1));
  }
  return runs;
}

/** One shape for every run object, so the hot loop stays monomorphic (slow sellers have hundreds). */
function run(
  start: number,
  end: number,
  kind: ZeroRunKind,
  mean: number,
  variance: number,
  p0: number,
  kStar: number,
  detectable: number,
): ZeroRun {
  return { start, end, kind, mean, variance, p0, kStar, detectable };
}
