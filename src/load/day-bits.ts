/**
 * Which (key, day) pairs a file has already produced, as one growable bitset of days per key:
 * memory is about (days spanned / 8) bytes per key, not per row (30k series x 1,900 days = 7 MB),
 * so in-file duplicates are found in the stream whatever the file size.
 */
export class DayBits {
  private readonly bases: number[] = [];
  private readonly words: Array<Uint32Array | undefined> = [];

  /** True when (key, day) was set before; sets it either way. */
  testAndSet(key: number, day: number): boolean {
    let w = this.words[key];
    let base = this.bases[key]!;
    if (w === undefined || day < base || day >= base + w.length * 32) {
      w = this.grow(key, day);
      base = this.bases[key]!;
    }
    const off = day - base;
    const i = off >>> 5;
    const m = 1 << (off & 31);
    const was = (w[i]! & m) !== 0;
    w[i] = w[i]! | m;
    return was;
  }

  has(key: number, day: number): boolean {
    const w = this.words[key];
    if (w === undefined) return false;
    const off = day - this.bases[key]!;
    if (off < 0 || off >= w.length * 32) return false;
    return (w[off >>> 5]! & (1 << (off & 31))) !== 0;
  }

  /** Bytes held by the bitsets. */
  get bytes(): number {
    let n = 0;
    for (const w of this.words) if (w) n += w.byteLength;
    return n;
  }

  private grow(key: number, day: number): Uint32Array {
    const old = this.words[key];
    if (old === undefined) {
      // Start with a year either side: most series cover contiguous days.
      const base = (day - 384) & ~31;
      const w = new Uint32Array(24);
      this.words[key] = w;
      this.bases[key] = base;
      return w;
    }
    const oldBase = this.bases[key]!;
    const oldEnd = oldBase + old.length * 32;
    const span = old.length * 32;
    // Double the span towards the day (or more, if the day is farther), keeping 32-day alignment.
    const lo = day < oldBase ? Math.min(day, oldBase - span) & ~31 : oldBase;
    const hi = day >= oldEnd ? Math.max(day + 1, oldEnd + span) : oldEnd;
    const w = new Uint32Array(Math.ceil((hi - lo) / 32));
    w.set(old, (oldBase - lo) >>> 5);
    this.words[key] = w;
    this.bases[key] = lo;
    return w;
  }
}
