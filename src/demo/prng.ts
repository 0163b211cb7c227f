/**
 * The demo chain's own pseudo-random numbers: xoshiro128** (32-bit state words, Math.imul) seeded
 * through splitmix32, so every stream is a pure function of the seed and the stream's labels.
 * Each series draws from its own stream (seed, purpose, store, item), which makes a series'
 * numbers independent of the order series are generated in and of the chain's size.
 */

const TWO_POW_32 = 4294967296;

/** One splitmix32 step: a well-mixed 32-bit value from a 32-bit state. */
function splitmix32(state: number): number {
  let z = (state + 0x9e3779b9) | 0;
  z = Math.imul(z ^ (z >>> 16), 0x85ebca6b);
  z = Math.imul(z ^ (z >>> 13), 0xc2b2ae35);
  return (z ^ (z >>> 16)) >>> 0;
}

export class Prng {
  private s0: number;
  private s1: number;
  private s2: number;
  private s3: number;
  private spare = Number.NaN;

  /** A stream named by a seed (any safe integer) and optional integer labels. */
  constructor(seed: number, ...labels: readonly number[]) {
    if (!Number.isSafeInteger(seed)) throw new RangeError(`seed must be a safe integer, got ${seed}`);
    let h = splitmix32(seed >>> 0);
    h = splitmix32(h ^ Math.floor(seed / TWO_POW_32));
    for (const label of labels) h = splitmix32(h ^ splitmix32(label | 0));
    this.s0 = splitmix32(h);
    this.s1 = splitmix32(this.s0 ^ 0x6a09e667);
    this.s2 = splitmix32(this.s1 ^ 0xbb67ae85);
    this.s3 = splitmix32(this.s2 ^ 0x3c6ef372);
    if ((this.s0 | this.s1 | this.s2 | this.s3) === 0) this.s3 = 1; // all-zero state never moves
  }

  /** The next raw 32-bit output (unsigned). */
  u32(): number {
    const s1 = this.s1;
    const r = Math.imul(rotl(Math.imul(s1, 5), 7), 9);
    const t = s1 << 9;
    this.s2 ^= this.s0;
    this.s3 ^= this.s1;
    this.s1 ^= this.s2;
    this.s0 ^= this.s3;
    this.s2 ^= t;
    this.s3 = rotl(this.s3, 11);
    return r >>> 0;
  }

  /** Uniform in [0, 1) with 32 bits of resolution. */
  float(): number {
    return this.u32() / TWO_POW_32;
  }

  /** Uniform integer in [0, n). */
  int(n: number): number {
    return Math.floor(this.float() * n);
  }

  /** Uniform integer in [lo, hi] inclusive. */
  intBetween(lo: number, hi: number): number {
    return lo + this.int(hi - lo + 1);
  }

  /** Uniform in [lo, hi). */
  between(lo: number, hi: number): number {
    return lo + (hi - lo) * this.float();
  }

  chance(p: number): boolean {
    return this.float() < p;
  }

  pick<T>(items: readonly T[]): T {
    if (items.length === 0) throw new RangeError('pick from an empty list');
    return items[this.int(items.length)] as T;
  }

  /** Standard normal (Box-Muller, the second value cached). */
  normal(): number {
    if (!Number.isNaN(this.spare)) {
      const v = this.spare;
      this.spare = Number.NaN;
      return v;
    }
    let u = this.float();
    while (u === 0) u = this.float();
    const r = Math.sqrt(-2 * Math.log(u));
    const a = 2 * Math.PI * this.float();
    this.spare = r * Math.sin(a);
    return r * Math.cos(a);
  }

  /** Log-normal with the given median and log-scale spread. */
  logNormal(median: number, sigma: number): number {
    return median * Math.exp(sigma * this.normal());
  }

  /**
   * Negative binomial count with mean `mean` and shape (size) `shape`: the gamma-Poisson mixture,
   * variance mean + mean²/shape. Inversion with the pmf recurrence for moderate means (exact, one
   * uniform); a rounded normal with the same moments above 80, where it is close and bounded.
   */
  negBinomial(mean: number, shape: number): number {
    if (!(mean > 0)) return 0;
    if (mean > 80) {
      const sd = Math.sqrt(mean + (mean * mean) / shape);
      return Math.max(0, Math.round(mean + sd * this.normal()));
    }
    const q = mean / (shape + mean);
    let p = Math.exp(-shape * Math.log1p(mean / shape));
    let cdf = p;
    const u = this.float();
    let x = 0;
    while (u >= cdf && x < 100_000) {
      p *= ((x + shape) / (x + 1)) * q;
      x++;
      cdf += p;
      if (p === 0) break; // the tail underflowed: u sat in the last ulp of the cdf
    }
    return x;
  }
}

function rotl(x: number, k: number): number {
  return (x << k) | (x >>> (32 - k));
}
