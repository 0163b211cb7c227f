import { type CacheState, sameCacheState } from './cache-sink.js';
import { NO_ROW } from './sales-blocks.js';

/**
 * The newest days of every series as the job runner's check pass assembled them, kept in this
 * process for the build that follows it: a refresh's partitions and its chain-wide group totals
 * read those days of every series, which are then in memory instead of read again from
 * `sales_blocks` (0.08 s a store and 0.3-0.5 s of staging on the 57M-row chain). What is kept
 * equals the blocks of the state the pass left (the blocks are written from the same arrays, or
 * were read into them), so a reader takes it only while the blocks' state is that one, and only
 * for days it holds; anything else reads the blocks.
 */
export const RECENT_DAYS = 512;

export interface RecentSales {
  /** The blocks' state whose days these are. */
  readonly state: CacheState;
  /** First and last day held (the last is the pass's cutoff). */
  readonly from: number;
  readonly upTo: number;
  /** Each series' first stored day up to `upTo`. */
  readonly firstDays: ReadonlyMap<number, number>;
  /**
   * Days lo..hi of a series into `out` (index 0 = day `base`) where it has a row; returns the
   * rows copied.
   */
  copy(seriesId: number, lo: number, hi: number, out: Float64Array, base: number): number;
}

let held: RecentSales | null = null;

/**
 * What a sales pass keeps while it streams the series (`runSalesPass` with copies kept): every
 * series' days in one growing array, so a pass allocates a few buffers instead of one per series.
 */
export class RecentSalesKeeper {
  private readonly firstDays = new Map<number, number>();
  /** Series id -> its slot in `firsts`, `offsets` and `lengths` (its first day and span in `data`). */
  private readonly spans = new Map<number, number>();
  private firsts = new Int32Array(1024);
  private offsets = new Int32Array(1024);
  private lengths = new Int32Array(1024);
  private data = new Int32Array(1 << 20);
  private used = 0;
  /** A stored value equal to NO_ROW: nothing is kept (as the blocks refuse it). */
  private unencodable = false;

  constructor(
    readonly from: number,
    readonly upTo: number,
  ) {
    held = null; // the previous pass's days are stale from now on
  }

  /** One series: a dense array from `firstDay` (NaN = no row), up to `upTo` at most. */
  add(seriesId: number, firstDay: number, units: Float64Array): void {
    if (this.unencodable || units.length === 0) return;
    this.firstDays.set(seriesId, firstDay);
    const start = Math.max(firstDay, this.from);
    const len = firstDay + units.length - start;
    if (len <= 0) return;
    const slot = this.spans.size;
    if (slot === this.firsts.length) {
      this.firsts = grown(this.firsts, slot * 2);
      this.offsets = grown(this.offsets, slot * 2);
      this.lengths = grown(this.lengths, slot * 2);
    }
    if (this.used + len > this.data.length) this.data = grown(this.data, 2 * (this.used + len));
    const out = this.data;
    const at = this.used;
    const skip = start - firstDay;
    for (let i = 0; i < len; i++) {
      const v = units[skip + i]!;
      if (v === NO_ROW) this.unencodable = true;
      out[at + i] = Number.isNaN(v) ? NO_ROW : v;
    }
    this.spans.set(seriesId, slot);
    this.firsts[slot] = start;
    this.offsets[slot] = at;
    this.lengths[slot] = len;
    this.used += len;
  }

  /** Keeps what was added as the days of the blocks in `state`; null keeps nothing. */
  finish(state: CacheState | null): void {
    if (state === null || this.unencodable) {
      held = null;
      return;
    }
    const { spans, firsts, offsets, lengths, data } = this;
    held = {
      state,
      from: this.from,
      upTo: this.upTo,
      firstDays: this.firstDays,
      copy(seriesId, lo, hi, out, base) {
        const slot = spans.get(seriesId);
        if (slot === undefined) return 0;
        const first = firsts[slot]!;
        const at = offsets[slot]! - first;
        const last = Math.min(hi, first + lengths[slot]! - 1);
        let rows = 0;
        for (let d = Math.max(lo, first); d <= last; d++) {
          const v = data[at + d]!;
          if (v !== NO_ROW) {
            out[d - base] = v;
            rows++;
          }
        }
        return rows;
      },
    };
  }
}

function grown(a: Int32Array, size: number): Int32Array<ArrayBuffer> {
  const b = new Int32Array(size);
  b.set(a);
  return b;
}

/** The kept days when they are those of the blocks in `state` and hold days from..upTo, else null. */
export function recentSales(state: CacheState, from: number, upTo: number): RecentSales | null {
  const h = held;
  if (h === null || from < h.from || upTo > h.upTo) return null;
  return sameCacheState(h.state, state) ? h : null;
}

/** Each series' first stored day as the blocks in `state` give it, when the pass read up to `upTo`, else null. */
export function recentFirstDays(state: CacheState, upTo: number): ReadonlyMap<number, number> | null {
  const h = held;
  if (h === null || upTo > h.upTo) return null;
  return sameCacheState(h.state, state) ? h.firstDays : null;
}

/** Forgets the kept days (tests compare both readers). */
export function forgetRecentSales(): void {
  held = null;
}
