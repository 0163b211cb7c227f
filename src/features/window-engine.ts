/**
 * Trailing-window statistics over a dense daily array, O(1) per window end: running integer
 * sums for count, mean, sample std and zero share; monotonic deques for min and max; a
 * two-stack queue for the exponentially weighted mean (no subtraction, so no cancellation when
 * large values leave the window). Inputs are integer counts (units or sums of units), so the
 * running sums are exact and the std comes from exact integers with a single division.
 */
export const WINDOW_STATS = ['mean', 'std', 'min', 'max', 'zero_share', 'ewm'] as const;
export type WindowStat = (typeof WINDOW_STATS)[number];

/** A daily series: `values[i]` is day `base + i`, NaN = missing. */
export interface DailyValues {
  readonly base: number;
  readonly values: Float64Array;
  /** First window end from which day `base + i` counts as missing (stock-out mask), or null. */
  readonly maskFrom: Int32Array | null;
  /** Distinct finite `maskFrom` values, ascending: ends where the window state is rebuilt. */
  readonly maskEvents: Int32Array | null;
}

export interface WindowSpec {
  readonly size: number;
  readonly stats: readonly WindowStat[];
  /** Fewer valid days in the window than this: every statistic is NaN. */
  readonly minDays: number;
  /** Smoothing factor of the exponentially weighted mean (weight (1 - alpha)^age). */
  readonly alpha: number;
}

// Beyond this, n * sum of squares is no longer an exact double and the std is taken in two passes.
const EXACT = 2 ** 53;

/**
 * Statistics of the windows [e - size + 1, e] for every end e in [eLo, eHi]; `out[k][e - eLo]`
 * is `spec.stats[k]` (NaN when fewer than `minDays` valid days, std also when fewer than 2).
 */
export function windowStats(
  input: DailyValues,
  spec: WindowSpec,
  eLo: number,
  eHi: number,
  out: Float64Array[],
): void {
  const { base, values, maskFrom, maskEvents } = input;
  const len = values.length;
  const w = spec.size;
  const lambda = 1 - spec.alpha;
  const pw = new Float64Array(w + 1);
  for (let k = 0; k <= w; k++) pw[k] = lambda ** k;
  const want = statFlags(spec.stats);

  let n = 0;
  let sum = 0;
  let sumSq = 0;
  let zeros = 0;
  // Deques of day numbers (ring buffers of capacity w).
  const minQ = new Int32Array(w);
  const maxQ = new Int32Array(w);
  let minH = 0;
  let minL = 0;
  let maxH = 0;
  let maxL = 0;
  // Two-stack queue for the weighted mean: front segment [fStart, fEnd] with suffix sums
  // relative to fEnd, back segment (fEnd, e] as running sums relative to its last day.
  const ring = new Float64Array(w);
  const fA = new Float64Array(w);
  const fB = new Float64Array(w);
  let fStart = 0;
  let fEnd = -1;
  let bA = 0;
  let bB = 0;
  let bStart = 0;
  let bEnd = -1;

  const valueAt = (d: number, end: number): number => {
    const i = d - base;
    if (i < 0 || i >= len) return Number.NaN;
    if (maskFrom !== null && maskFrom[i]! <= end) return Number.NaN;
    return values[i]!;
  };
  const slot = (d: number) => ((d % w) + w) % w;

  const push = (d: number, v: number) => {
    const valid = !Number.isNaN(v);
    if (valid) {
      n++;
      sum += v;
      sumSq += v * v;
      if (v === 0) zeros++;
      if (want.min) {
        while (minL > 0 && ring[slot(minQ[(minH + minL - 1) % w]!)]! >= v) minL--;
        minQ[(minH + minL) % w] = d;
        minL++;
      }
      if (want.max) {
        while (maxL > 0 && ring[slot(maxQ[(maxH + maxL - 1) % w]!)]! <= v) maxL--;
        maxQ[(maxH + maxL) % w] = d;
        maxL++;
      }
    }
    ring[slot(d)] = v;
    if (want.ewm) {
      const y = valid ? v : 0;
      const b = valid ? 1 : 0;
      if (bEnd < bStart) {
        bStart = d;
        bA = y;
        bB = b;
      } else {
        bA = bA * lambda + y;
        bB = bB * lambda + b;
      }
      bEnd = d;
    }
  };

  const pop = (d: number) => {
    const v = ring[slot(d)]!;
    if (!Number.isNaN(v)) {
      n--;
      sum -= v;
      sumSq -= v * v;
      if (v === 0) zeros--;
      if (want.min && minL > 0 && minQ[minH] === d) {
        minH = (minH + 1) % w;
        minL--;
      }
      if (want.max && maxL > 0 && maxQ[maxH] === d) {
        maxH = (maxH + 1) % w;
        maxL--;
      }
    }
    if (want.ewm) {
      if (fEnd < fStart) {
        // Front empty: move the back segment over, with suffix sums relative to its last day.
        let a = 0;
        let b = 0;
        for (let x = bEnd; x >= bStart; x--) {
          const y = ring[slot(x)]!;
          const k = bEnd - x;
          if (!Number.isNaN(y)) {
            a += y * pw[k]!;
            b += pw[k]!;
          }
          fA[slot(x)] = a;
          fB[slot(x)] = b;
        }
        fStart = bStart;
        fEnd = bEnd;
        bStart = bEnd + 1;
        bEnd = bStart - 1;
        bA = 0;
        bB = 0;
      }
      fStart++;
    }
  };

  const reset = (end: number) => {
    n = 0;
    sum = 0;
    sumSq = 0;
    zeros = 0;
    minH = minL = maxH = maxL = 0;
    fStart = 0;
    fEnd = -1;
    bStart = 0;
    bEnd = -1;
    bA = bB = 0;
    for (let d = end - w + 1; d <= end; d++) push(d, valueAt(d, end));
  };

  let ev = 0;
  const events = maskEvents;
  for (let e = eLo; e <= eHi; e++) {
    let rebuild = e === eLo;
    if (events !== null) {
      while (ev < events.length && events[ev]! < e) ev++;
      if (ev < events.length && events[ev] === e) rebuild = true;
    }
    if (rebuild) reset(e);
    else {
      pop(e - w);
      push(e, valueAt(e, e));
    }
    const j = e - eLo;
    const ok = n >= spec.minDays && n > 0;
    for (let k = 0; k < spec.stats.length; k++) {
      const col = out[k]!;
      if (!ok) {
        col[j] = Number.NaN;
        continue;
      }
      switch (spec.stats[k]!) {
        case 'mean':
          col[j] = sum / n;
          break;
        case 'std':
          col[j] = n < 2 ? Number.NaN : sampleStd(n, sum, sumSq, ring, w, e);
          break;
        case 'min':
          col[j] = ring[slot(minQ[minH]!)]!;
          break;
        case 'max':
          col[j] = ring[slot(maxQ[maxH]!)]!;
          break;
        case 'zero_share':
          col[j] = zeros / n;
          break;
        case 'ewm': {
          let a = bEnd >= bStart ? bA : 0;
          let b = bEnd >= bStart ? bB : 0;
          if (fEnd >= fStart) {
            const f = pw[e - fEnd]!;
            a += fA[slot(fStart)]! * f;
            b += fB[slot(fStart)]! * f;
          }
          col[j] = b > 0 ? a / b : Number.NaN;
          break;
        }
      }
    }
  }
}

function sampleStd(n: number, sum: number, sumSq: number, ring: Float64Array, w: number, e: number): number {
  const a = n * sumSq;
  if (a < EXACT && sum * sum < EXACT) {
    const v = (a - sum * sum) / (n * (n - 1));
    return Math.sqrt(Math.max(v, 0));
  }
  // Large totals (chain-level sums): two passes over the window.
  const mean = sum / n;
  let ss = 0;
  for (let d = e - w + 1; d <= e; d++) {
    const v = ring[((d % w) + w) % w]!;
    if (!Number.isNaN(v)) ss += (v - mean) * (v - mean);
  }
  return Math.sqrt(ss / (n - 1));
}

function statFlags(stats: readonly WindowStat[]) {
  return { min: stats.includes('min'), max: stats.includes('max'), ewm: stats.includes('ewm') };
}

/** The usual smoothing factor for a window of `size` days: 2 / (size + 1) (common practice). */
export function defaultAlpha(size: number): number {
  return 2 / (size + 1);
}
