/**
 * Robust location and scale for the outlier checks: median, median absolute deviation and the
 * modified z-score of Iglewicz and Hoaglin (1993), M = 0.6745 (x - median) / MAD.
 */

/** 0.6745 ~ Phi^-1(0.75): makes MAD comparable with a standard deviation under normality. */
export const MODIFIED_Z_FACTOR = 0.6745;

/** Median of `a`, which is sorted in place; NaN when empty. */
export function medianInPlace(a: Float64Array): number {
  const n = a.length;
  if (n === 0) return Number.NaN;
  a.sort();
  const h = n >> 1;
  return n % 2 ? a[h]! : (a[h - 1]! + a[h]!) / 2;
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
  const a = scratch.subarray(0, n);
  for (let i = 0; i < n; i++) a[i] = values[i] as number;
  const med = medianInPlace(a);
  for (let i = 0; i < n; i++) a[i] = Math.abs((values[i] as number) - med);
  return { median: med, mad: medianInPlace(a) };
}
