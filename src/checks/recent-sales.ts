import type { CacheState } from './cache-sink.js';
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

interface RecentSeries {
  /** Day of `units[0]`. */
  readonly first: number;
  /** Units per day, NO_ROW where no row. */
  readonly units: Int32Array;
}

export interface RecentSales {
  /** The blocks' state whose days these are. */
  readonly state: CacheState;
  /** First and last day held (the last is the pass's cutoff). */
  readonly from: number;
  readonly upTo: number;
  readonly series: ReadonlyMap<number, RecentSeries>;
  /** Each series' first stored day up to `upTo`. */
  readonly firstDays: ReadonlyMap<number, number>;
}

let held: RecentSales | null = null;

/** What a sales pass keeps while it streams the series (`runSalesPass` with copies kept). */
export class RecentSalesKeeper {
  private readonly series = new Map<number, RecentSeries>();
  private readonly firstDays = new Map<number, number>();
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
    const last = firstDay + units.length - 1;
    if (last < start) return;
    const out = new Int32Array(last - start + 1);
    for (let d = start; d <= last; d++) {
      const v = units[d - firstDay]!;
      if (v === NO_ROW) this.unencodable = true;
      out[d - start] = Number.isNaN(v) ? NO_ROW : v;
    }
    this.series.set(seriesId, { first: start, units: out });
  }

  /** Keeps what was added as the days of the blocks in `state`; null keeps nothing. */
  finish(state: CacheState | null): void {
    held =
      state === null || this.unencodable
        ? null
        : { state, from: this.from, upTo: this.upTo, series: this.series, firstDays: this.firstDays };
  }
}

/** The kept days when they are those of the blocks in `state` and hold days from..upTo, else null. */
export function recentSales(state: CacheState, from: number, upTo: number): RecentSales | null {
  const h = held;
  if (h === null || from < h.from || upTo > h.upTo) return null;
  return sameState(h.state, state) ? h : null;
}

/** Each series' first stored day as the blocks in `state` give it, when the pass read up to `upTo`, else null. */
export function recentFirstDays(state: CacheState, upTo: number): ReadonlyMap<number, number> | null {
  const h = held;
  if (h === null || upTo > h.upTo) return null;
  return sameState(h.state, state) ? h.firstDays : null;
}

const sameState = (a: CacheState, b: CacheState) =>
  a.coveredTo === b.coveredTo && a.last === b.last && a.count === b.count;

/** Forgets the kept days (tests compare both readers). */
export function forgetRecentSales(): void {
  held = null;
}
