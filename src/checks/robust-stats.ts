/**
 * Robust location and scale for the outlier checks: median, median absolute deviation and the
 * modified z-score M = 0.6745 (x - median) / MAD.
 */

/** 0.6745 ~ Phi^-1(0.75): makes MAD comparable with a standard deviation under normality. */
export const MODIFIED_Z_FACTOR = 0.6745;

/**
 * Rearranges `a` so that a[k] holds the k-th smallest value, everything before it is <= a[k]
 * and everything after >= a[k] (quickselect, expected O(n): the checks call it on short
 * windows millions of times, where two full sorts per call were measurable).
 */
export function selectInPlace(a: Float64Array, k: number, n = a.length): number {
  let lo = 0;
  let hi = n - 1;
  while (hi > lo) {
    const pivot = a[(lo + hi) >> 1]!;
    let i = lo;
    let j = hi;
    while (i <= j) {
      while (a[i]! < pivot) i++;
      while (a[j]! > pivot) j--;
      if (i <= j) {
        const t = a[i]!;
        a[i] = a[j]!;
        a[j] = t;
        i++;
        j--;
      }
    }
    if (k <= j) hi = j;
    else if (k >= i) lo = i;
    else break;
  }
  return a[k]!;
}

/** Median of the first `n` values of `a`, which are reordered in place; NaN when n is 0. */
export function medianInPlace(a: Float64Array, n = a.length): number {
  if (n === 0) return Number.NaN;
  const h = n >> 1;
  const upper = selectInPlace(a, h, n);
  if (n % 2) return upper;
  // The lower middle is the largest value left of the upper one.
  let lower = a[0]!;
  for (let i = 1; i < h; i++) if (a[i]! > lower) lower = a[i]!;
  return (lower + upper) / 2;
}

/** Median of the values (the input is not changed). */
export function median(values: ArrayLike<number>): number {
  return medianInPlace(Float64Array.from(values));
}

/** Raw (unscaled) median absolute deviation around `center` (default: the median). */
export function medianAbsoluteDeviation(values: ArrayLike<number>, center = median(values)): number {
  const dev = new Float64Array(values.length);
  for (let i = 0; i < values.length; i++) dev[i] = Math.abs((values[i] as number) - center);
  return medianInPlace(dev);
}

/** Modified z-score of `x`; +-Infinity when MAD is 0 and x differs from the median, NaN when equal. */
export function modifiedZ(x: number, med: number, mad: number): number {
  return (MODIFIED_Z_FACTOR * (x - med)) / mad;
}

/**
 * Median and MAD of `n` values using `scratch` (length >= n) as work space; `values` is left
 * unchanged. For the rolling windows of the checks, which call it many times.
 */
export function medianAndMad(
  values: ArrayLike<number>,
  n: number,
  scratch: Float64Array,
): { median: number; mad: number } {
  for (let i = 0; i < n; i++) scratch[i] = values[i] as number;
  const med = medianInPlace(scratch, n);
  for (let i = 0; i < n; i++) scratch[i] = Math.abs((values[i] as number) - med);
  return { median: med, mad: medianInPlace(scratch, n) };
}
