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

/** Growable scratch arrays by slot, so a build's many window passes allocate almost nothing. */
const scratch = {
  f: [] as Float64Array[],
  i: [] as Int32Array[],
  u: [] as Uint8Array[],
  f64(slot: number, n: number): Float64Array {
    let a = this.f[slot];
    if (!a || a.length < n) this.f[slot] = a = new Float64Array(Math.max(n, 2 * (a?.length ?? 0)));
    return a.subarray(0, n);
  },
  i32(slot: number, n: number): Int32Array {
    let a = this.i[slot];
    if (!a || a.length < n) this.i[slot] = a = new Int32Array(Math.max(n, 2 * (a?.length ?? 0)));
    return a.subarray(0, n);
  },
  u8(slot: number, n: number): Uint8Array {
    let a = this.u[slot];
    if (!a || a.length < n) this.u[slot] = a = new Uint8Array(Math.max(n, 2 * (a?.length ?? 0)));
    return a.subarray(0, n);
  },
};

/**
 * The running state of one window over a padded array `x` (index j = day - origin): counts and
 * exact sums, monotonic deques of indices for min and max, and the two-stack queue of the
 * weighted mean. `counted[j]` records what was added, so removal undoes exactly that.
 */
class WindowState {
  n = 0;
  sum = 0;
  sumSq = 0;
  zeros = 0;
  minH = 0;
  minL = 0;
  maxH = 0;
  maxL = 0;
  // Two-stack queue: front [fStart, fEnd] with suffix sums relative to fEnd; back (fEnd, last].
  fStart = 0;
  fEnd = -1;
  bStart = 0;
  bEnd = -1;
  bA = 0;
  bB = 0;
  readonly minQ: Int32Array;
  readonly maxQ: Int32Array;
  readonly fA: Float64Array;
  readonly fB: Float64Array;
  readonly counted: Uint8Array;

  constructor(
    readonly x: Float64Array,
    readonly w: number,
    readonly lambda: number,
    readonly pw: Float64Array,
    readonly wantMin: boolean,
    readonly wantMax: boolean,
    readonly wantEwm: boolean,
  ) {
    // Scratch reused across calls (the engine is synchronous): every slot is written before read.
    this.minQ = scratch.i32(0, w);
    this.maxQ = scratch.i32(1, w);
    this.fA = scratch.f64(1, x.length);
    this.fB = scratch.f64(2, x.length);
    this.counted = scratch.u8(0, x.length);
  }

  reset(): void {
    this.n = this.sum = this.sumSq = this.zeros = 0;
    this.minH = this.minL = this.maxH = this.maxL = 0;
    this.fStart = 0;
    this.fEnd = -1;
    this.bStart = 0;
    this.bEnd = -1;
    this.bA = this.bB = 0;
  }

  /** Appends day j; it counts when `visible` (a value that the mask does not hide). */
  add(j: number, visible: boolean): void {
    const v = this.x[j]!;
    const valid = visible && !Number.isNaN(v);
    this.counted[j] = valid ? 1 : 0;
    const w = this.w;
    if (valid) {
      this.n++;
      this.sum += v;
      this.sumSq += v * v;
      if (v === 0) this.zeros++;
      if (this.wantMin) {
        const q = this.minQ;
        while (this.minL > 0 && this.x[q[(this.minH + this.minL - 1) % w]!]! >= v) this.minL--;
        q[(this.minH + this.minL) % w] = j;
        this.minL++;
      }
      if (this.wantMax) {
        const q = this.maxQ;
        while (this.maxL > 0 && this.x[q[(this.maxH + this.maxL - 1) % w]!]! <= v) this.maxL--;
        q[(this.maxH + this.maxL) % w] = j;
        this.maxL++;
      }
    }
    if (this.wantEwm) {
      const y = valid ? v : 0;
      const b = valid ? 1 : 0;
      if (this.bEnd < this.bStart) {
        this.bStart = j;
        this.bA = y;
        this.bB = b;
      } else {
        this.bA = this.bA * this.lambda + y;
        this.bB = this.bB * this.lambda + b;
      }
      this.bEnd = j;
    }
  }

  /** Drops day j, the oldest of the window. */
  remove(j: number): void {
    if (this.counted[j] === 1) {
      const v = this.x[j]!;
      this.n--;
      this.sum -= v;
      this.sumSq -= v * v;
      if (v === 0) this.zeros--;
      if (this.minL > 0 && this.minQ[this.minH] === j) {
        this.minH = (this.minH + 1) % this.w;
        this.minL--;
      }
      if (this.maxL > 0 && this.maxQ[this.maxH] === j) {
        this.maxH = (this.maxH + 1) % this.w;
        this.maxL--;
      }
    }
    if (this.wantEwm) {
      if (this.fEnd < this.fStart) {
        // Front empty: move the back segment over, with suffix sums relative to its last day.
        let a = 0;
        let b = 0;
        for (let k = this.bEnd; k >= this.bStart; k--) {
          if (this.counted[k] === 1) {
            const f = this.pw[this.bEnd - k]!;
            a += this.x[k]! * f;
            b += f;
          }
          this.fA[k] = a;
          this.fB[k] = b;
        }
        this.fStart = this.bStart;
        this.fEnd = this.bEnd;
        this.bStart = this.bEnd + 1;
        this.bEnd = this.bStart - 1;
        this.bA = this.bB = 0;
      }
      this.fStart++;
    }
  }

  /**
   * After a rebuild of the window [J - w + 1, J] (index j = day - origin): lays the weighted-mean
   * queue on blocks of w days aligned to absolute days, as the steady state keeps it (the back
   * always starts on a block start, so every flip moves exactly one block): the front holds the
   * part of the previous block in the window, with suffix sums from that block's last day down,
   * the back the current block from its start, by Horner. Every sum is then the same sequence
   * of operations whichever day the pass started on, so a refresh that starts later gives the
   * full build's values bit for bit.
   */
  alignEwm(J: number, origin: number): void {
    const w = this.w;
    const first = J - w + 1;
    const K = J - ((((origin + J) % w) + w) % w);
    let a = 0;
    let b = 0;
    for (let k = K - 1; k >= first; k--) {
      if (this.counted[k] === 1) {
        const f = this.pw[K - 1 - k]!;
        a += this.x[k]! * f;
        b += f;
      }
      this.fA[k] = a;
      this.fB[k] = b;
    }
    this.fStart = first;
    this.fEnd = K - 1;
    this.bStart = K;
    this.bEnd = K - 1;
    this.bA = this.bB = 0;
    for (let j = K; j <= J; j++) {
      const valid = this.counted[j] === 1;
      const y = valid ? this.x[j]! : 0;
      const c = valid ? 1 : 0;
      if (this.bEnd < this.bStart) {
        this.bA = y;
        this.bB = c;
      } else {
        this.bA = this.bA * this.lambda + y;
        this.bB = this.bB * this.lambda + c;
      }
      this.bEnd = j;
    }
  }

  ewm(j: number): number {
    let a = this.bEnd >= this.bStart ? this.bA : 0;
    let b = this.bEnd >= this.bStart ? this.bB : 0;
    if (this.fEnd >= this.fStart) {
      const f = this.pw[j - this.fEnd]!;
      a += this.fA[this.fStart]! * f;
      b += this.fB[this.fStart]! * f;
    }
    return b > 0 ? a / b : Number.NaN;
  }
}

const NO_POWERS = new Float64Array(0);
const powerTables = new Map<string, Float64Array>();
/** lambda^k for k = 0..w, computed once per (lambda, w): a build asks for the same few per series. */
function powers(lambda: number, w: number): Float64Array {
  const key = `${lambda}:${w}`;
  let pw = powerTables.get(key);
  if (!pw) {
    pw = new Float64Array(w + 1);
    for (let k = 0; k <= w; k++) pw[k] = lambda ** k;
    if (powerTables.size < 256) powerTables.set(key, pw);
  }
  return pw;
}

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
  const w = spec.size;
  // A padded copy over [eLo - w + 1, eHi]: no bounds checks inside the loop.
  const origin = eLo - w + 1;
  const span = eHi - origin + 1;
  const x = scratch.f64(0, span).fill(Number.NaN);
  const mf = maskFrom ? scratch.i32(2, span).fill(2147483647) : null;
  const lo = Math.max(0, base - origin);
  const hi = Math.min(span, base + values.length - origin);
  for (let j = lo; j < hi; j++) {
    x[j] = values[j + origin - base]!;
    if (mf) mf[j] = maskFrom![j + origin - base]!;
  }
  const lambda = 1 - spec.alpha;
  const idx = (s: WindowStat) => spec.stats.indexOf(s);
  const [kMean, kStd, kMin, kMax, kZero, kEwm] = (
    ['mean', 'std', 'min', 'max', 'zero_share', 'ewm'] as const
  ).map(idx) as [number, number, number, number, number, number];
  const pw = kEwm >= 0 ? powers(lambda, w) : NO_POWERS;
  const st = new WindowState(x, w, lambda, pw, kMin >= 0, kMax >= 0, kEwm >= 0);
  const minDays = Math.max(1, spec.minDays);
  let ev = 0;
  for (let e = eLo; e <= eHi; e++) {
    const J = e - origin;
    let rebuild = e === eLo;
    if (maskEvents !== null) {
      while (ev < maskEvents.length && maskEvents[ev]! < e) ev++;
      if (ev < maskEvents.length && maskEvents[ev] === e) rebuild = true;
    }
    if (rebuild) {
      st.reset();
      for (let j = J - w + 1; j <= J; j++) st.add(j, mf === null || mf[j]! > e);
      if (kEwm >= 0) st.alignEwm(J, origin);
    } else {
      st.remove(J - w);
      st.add(J, mf === null || mf[J]! > e);
    }
    const o = e - eLo;
    const n = st.n;
    if (n < minDays) {
      for (let k = 0; k < out.length; k++) out[k]![o] = Number.NaN;
      continue;
    }
    if (kMean >= 0) out[kMean]![o] = st.sum / n;
    if (kStd >= 0)
      out[kStd]![o] = n < 2 ? Number.NaN : sampleStd(n, st.sum, st.sumSq, x, st.counted, J - w + 1, J);
    if (kMin >= 0) out[kMin]![o] = x[st.minQ[st.minH]!]!;
    if (kMax >= 0) out[kMax]![o] = x[st.maxQ[st.maxH]!]!;
    if (kZero >= 0) out[kZero]![o] = st.zeros / n;
    if (kEwm >= 0) out[kEwm]![o] = st.ewm(J);
  }
}

function sampleStd(
  n: number,
  sum: number,
  sumSq: number,
  x: Float64Array,
  counted: Uint8Array,
  from: number,
  to: number,
): number {
  const a = n * sumSq;
  if (a < EXACT && sum * sum < EXACT) {
    const v = (a - sum * sum) / (n * (n - 1));
    return Math.sqrt(Math.max(v, 0));
  }
  // Large totals (chain-level sums): two passes over the window.
  const mean = sum / n;
  let ss = 0;
  for (let j = from; j <= to; j++) if (counted[j] === 1) ss += (x[j]! - mean) * (x[j]! - mean);
  return Math.sqrt(ss / (n - 1));
}

/** The usual smoothing factor for a window of `size` days: 2 / (size + 1) (common practice). */
export function defaultAlpha(size: number): number {
  return 2 / (size + 1);
}
