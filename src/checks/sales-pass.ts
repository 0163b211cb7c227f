import { formatDay } from '../core/days.js';
import { readCopyBinary } from '../db/binary-copy.js';
import type { Db } from '../db/database.js';
import { RECENT_DAYS, RecentSalesKeeper } from './recent-sales.js';
import { BLOCK_DAYS, BlockSink, blockOf, NO_ROW, planBlocks, readBlocks, readTail } from './sales-blocks.js';
import type { Guarded } from './shared-pass.js';
import { soldWeekStarts } from './sold-weeks.js';

/**
 * One series as the sales pass hands it to visitors: a dense daily array from the series' first
 * stored day to its last, NaN where no row exists. The arrays are reused for the next series, so
 * a visitor must copy whatever it keeps.
 */
export interface SeriesView {
  readonly seriesId: number;
  /** Epoch day of index 0. */
  readonly firstDay: number;
  /** Units per day; NaN = no row that day. Length = last stored day - firstDay + 1. */
  readonly units: Float64Array;
  /** Stored rows of the series. */
  readonly rows: number;
  /**
   * First days of the retail weeks in which the series sold (computed once per series however
   * many visitors ask; a fresh array each series, so it may be kept).
   */
  soldWeeks(): Int32Array;
}

export interface SeriesVisitor {
  series(s: SeriesView): void;
}

/** Chain-wide totals per day between the first and the last stored day. */
export interface DailyTotals {
  readonly firstDay: number;
  readonly units: Float64Array;
  readonly rows: Int32Array;
}

export interface SalesPassResult {
  /** Epoch days of the oldest and newest stored day (null: no rows up to the cutoff). */
  readonly firstDay: number | null;
  readonly lastDay: number | null;
  readonly rows: number;
  readonly series: number;
  readonly daily: DailyTotals;
  readonly source: SalesSource;
}

/** The ordered read every sales-based check shares; the cutoff is an epoch day, inlined as a date literal. */
export function salesCopySql(cutoff: number | null): string {
  const where = cutoff === null ? '' : ` WHERE day <= DATE '${formatDay(cutoff)}'`;
  return `COPY (SELECT series_id, day, units FROM sales${where} ORDER BY series_id, day) TO STDOUT (FORMAT binary)`;
}

/** Grows in both directions so daily totals need no first pass to find the day range. */
class DayAccumulator {
  base = 0;
  units = new Float64Array(0);
  rows = new Int32Array(0);
  min = Number.POSITIVE_INFINITY;
  max = Number.NEGATIVE_INFINITY;

  add(day: number, units: number): void {
    let i = day - this.base;
    if (i < 0 || i >= this.units.length) {
      this.grow(day);
      i = day - this.base;
    }
    this.units[i]! += units;
    this.rows[i]!++;
    if (day < this.min) this.min = day;
    if (day > this.max) this.max = day;
  }

  /** Makes room for days lo..hi without counting anything (`units` and `rows` may be replaced). */
  reserve(lo: number, hi: number): void {
    if (lo - this.base < 0 || lo - this.base >= this.units.length) this.grow(lo);
    if (hi - this.base < 0 || hi - this.base >= this.units.length) this.grow(hi);
  }

  /** A day that holds a row (written straight into `units` and `rows` after `reserve`). */
  note(day: number): void {
    if (day < this.min) this.min = day;
    if (day > this.max) this.max = day;
  }

  private grow(day: number): void {
    const lo = Math.min(this.units.length ? this.base : day, day) - 512;
    const hi = Math.max(this.units.length ? this.base + this.units.length : day + 1, day + 1) + 512;
    const units = new Float64Array(hi - lo);
    const rows = new Int32Array(hi - lo);
    if (this.units.length) {
      units.set(this.units, this.base - lo);
      rows.set(this.rows, this.base - lo);
    }
    this.base = lo;
    this.units = units;
    this.rows = rows;
  }

  result(): DailyTotals {
    if (this.max < this.min) return { firstDay: 0, units: new Float64Array(0), rows: new Int32Array(0) };
    const a = this.min - this.base;
    const b = this.max - this.base + 1;
    return { firstDay: this.min, units: this.units.slice(a, b), rows: this.rows.slice(a, b) };
  }
}

/** Where a pass took its rows from (recorded with the check run). */
export interface SalesSource {
  /** Days up to here came from the stored blocks (null: none). */
  readonly blocksTo: string | null;
  /** Why the blocks were not (wholly) usable. */
  readonly reason: string | null;
  readonly rowsFromBlocks: number;
  readonly rowsFromSales: number;
  /** First day of the first block the pass rewrote ('all': every block; null: none written). */
  readonly wroteFrom: string | null;
  readonly wroteBlocks: number;
}

/**
 * Streams the sales up to the cutoff once in (series_id, day) order, assembling each series into
 * a dense array for the visitors and adding every row to the chain's daily totals. The days the
 * stored blocks hold (sales-blocks.ts) come from them, the rest from `sales` by binary COPY; with
 * `keepCopies` the pass then stores the blocks of the days it read from `sales`, for later passes.
 */
export async function runSalesPass(
  db: Db,
  cutoff: number | null,
  visitors: ReadonlyArray<Guarded<SeriesVisitor>>,
  weekStart: (day: number) => number,
  /** Store the blocks of the days read from `sales` for later passes (the job runner's checks). */
  keepCopies = false,
  /** Also keep each series' newest days in this process for the build that follows (recent-sales.ts). */
  keepRecent = false,
): Promise<SalesPassResult> {
  const totals = new DayAccumulator();
  // Each series is written straight into its dense array as its rows arrive in day order: days
  // without a row are filled with NaN as the next row passes them.
  let dense = new Float64Array(4096);
  let first = 0;
  let last = -1;
  let n = 0;
  let current = -1;
  let rows = 0;
  let series = 0;

  const plan = await planBlocks(db);
  // Days the blocks give this pass: up to the usable day, and never past the cutoff.
  const fromBlocks =
    plan.usable === null ? null : cutoff === null ? plan.usable : Math.min(plan.usable, cutoff);
  const writesFrom = fromBlocks === null ? null : fromBlocks + 1;
  const sink =
    keepCopies && (fromBlocks === null || cutoff === null || cutoff > fromBlocks)
      ? new BlockSink(db, plan, writesFrom === null ? null : blockOf(writesFrom))
      : null;

  // The runner's build reads the newest days next: they stay in this process (recent-sales.ts).
  const keeper =
    keepRecent && cutoff !== null ? new RecentSalesKeeper(cutoff - RECENT_DAYS + 1, cutoff) : null;

  const emit = () => {
    if (n === 0) return;
    series++;
    const view = dense.subarray(0, last + 1);
    const firstDay = first;
    sink?.add(current, firstDay, view);
    keeper?.add(current, firstDay, view);
    let sold: Int32Array | undefined;
    const s: SeriesView = {
      seriesId: current,
      firstDay,
      units: view,
      rows: n,
      soldWeeks: () => {
        sold ??= soldWeekStarts(firstDay, view, weekStart);
        return sold;
      },
    };
    for (const v of visitors) v.call((x) => x.series(s));
  };

  const add = (s: number, d: number, u: number) => {
    if (s !== current) {
      emit();
      current = s;
      first = d;
      last = -1;
      n = 0;
    }
    const off = d - first;
    if (off >= dense.length) {
      const next = new Float64Array(Math.max(off + 1, dense.length * 2));
      next.set(dense.subarray(0, last + 1));
      dense = next;
    }
    for (let k = last + 1; k < off; k++) dense[k] = Number.NaN;
    dense[off] = u;
    if (off > last) last = off;
    n++;
    totals.add(d, u);
  };

  /**
   * The stored days of one block (days day0 .. day0 + stop - 1 as int4 at `offset`, NO_ROW for
   * none) as `add` would take them one by one, in one loop: the pass's most frequent work.
   * Returns the rows it held.
   */
  const addBlock = (sid: number, day0: number, view: DataView, offset: number, stop: number): number => {
    let k = 0;
    if (sid !== current) {
      // A series starts at its first stored day.
      while (k < stop && view.getInt32(offset + 4 * k, true) === NO_ROW) k++;
      if (k === stop) return 0;
      emit();
      current = sid;
      first = day0 + k;
      last = -1;
      n = 0;
      totals.note(first);
    }
    const at = day0 - first;
    if (at + stop > dense.length) {
      const next = new Float64Array(Math.max(at + stop, dense.length * 2));
      next.set(dense.subarray(0, last + 1));
      dense = next;
    }
    for (let j = last + 1; j < at + k; j++) dense[j] = Number.NaN;
    totals.reserve(day0 + k, day0 + stop - 1);
    const tu = totals.units;
    const tr = totals.rows;
    const tb = day0 - totals.base;
    let stored = 0;
    let lastHere = -1;
    for (; k < stop; k++) {
      const v = view.getInt32(offset + 4 * k, true);
      if (v === NO_ROW) {
        dense[at + k] = Number.NaN;
        continue;
      }
      dense[at + k] = v;
      tu[tb + k]! += v;
      tr[tb + k]!++;
      lastHere = k;
      stored++;
    }
    if (stored > 0) {
      last = at + lastHere;
      n += stored;
      totals.note(day0 + lastHere);
    }
    return stored;
  };

  let rowsFromBlocks = 0;
  let rowsFromSales = 0;
  try {
    if (fromBlocks === null) {
      // Small batches keep each synchronous stretch of visitor work short, so the server goes on
      // filling the socket's buffers while Node works instead of waiting for Node to read.
      const batches = readCopyBinary(db.copyTo(salesCopySql(cutoff)), ['int4', 'date', 'int4'], 8192);
      for await (const batch of batches) {
        const sid = batch.columns[0] as Int32Array;
        const day = batch.columns[1] as Int32Array;
        const u = batch.columns[2] as Int32Array;
        rowsFromSales += batch.length;
        for (let i = 0; i < batch.length; i++) add(sid[i]!, day[i]!, u[i]!);
      }
    } else {
      const tail =
        cutoff !== null && cutoff <= fromBlocks
          ? { n: 0, sid: new Int32Array(0), day: new Int32Array(0), units: new Int32Array(0) }
          : await readTail(db, fromBlocks, cutoff);
      rowsFromSales = tail.n;
      let t = 0;
      // Tail rows of every series before `sid` (the series' own block rows come first).
      const drain = (sid: number) => {
        for (; t < tail.n && tail.sid[t]! < sid; t++) add(tail.sid[t]!, tail.day[t]!, tail.units[t]!);
      };
      let blockSeries = -1;
      await readBlocks(db, fromBlocks, (sid, day0, view, offset) => {
        if (sid !== blockSeries) {
          drain(sid);
          blockSeries = sid;
        }
        rowsFromBlocks += addBlock(sid, day0, view, offset, Math.min(BLOCK_DAYS, fromBlocks - day0 + 1));
      });
      drain(Number.POSITIVE_INFINITY);
    }
    emit();
  } catch (err) {
    await sink?.finish(null).catch(() => {});
    throw err;
  }
  const daily = totals.result();
  // The blocks now hold every row up to the newest day read (later passes read on from there).
  rows = rowsFromBlocks + rowsFromSales;
  const grew = rows > 0 && (fromBlocks === null || totals.max > fromBlocks);
  const stored = sink ? await sink.finish(grew ? totals.max : null) : false;
  // The blocks now are those written from the same arrays, or (nothing written) the ones planned.
  keeper?.finish(
    stored ? { coveredTo: totals.max, last: plan.mark.last, count: plan.mark.count } : plan.state,
  );
  return {
    firstDay: rows ? totals.min : null,
    lastDay: rows ? totals.max : null,
    rows,
    series,
    daily,
    source: {
      blocksTo: fromBlocks === null ? null : formatDay(fromBlocks),
      reason: plan.reason,
      rowsFromBlocks,
      rowsFromSales,
      wroteFrom:
        stored && sink ? (sink.fromBlock === null ? 'all' : formatDay(sink.fromBlock * BLOCK_DAYS)) : null,
      wroteBlocks: stored && sink ? sink.blocks : 0,
    },
  };
}
