/**
 * Sales rows, long (`item_id, store_id, day, units`) or wide (`item_id, store_id, <day>, ...`),
 * mapped to integer series ids. Lookups are cached on the previous row's ids: a long file sorted
 * by series repeats them on nearly every row.
 */
import { formatDay } from '../core/days.js';
import { DayBits } from './day-bits.js';
import { type EncodeContext, type RowEncoder, ragged } from './encode-context.js';
import { DayParser, dayProblem, parseUnits, textProblem, unitsProblem } from './fields.js';
import type { HeaderPlan } from './header.js';

/** The stored series (item x store -> series_id) and the next free id; new series are appended. */
export interface SeriesData {
  readonly itemIds: string[];
  readonly storeIds: string[];
  readonly seriesIds: number[];
  /** Index in the arrays where series created by this load start. */
  readonly storedCount: number;
  nextId: number;
}

const SEP = '\u0000';

/** In-memory series map; unknown item x store pairs get new ids (stored: checks flag unknown ids). */
export class SeriesLookup {
  private readonly index = new Map<string, number>();

  constructor(readonly data: SeriesData) {
    for (let i = 0; i < data.itemIds.length; i++)
      this.index.set(data.itemIds[i]! + SEP + data.storeIds[i]!, i);
  }

  /** The position of (item, store) in the arrays, creating the series when absent. */
  position(item: string, store: string): number {
    const k = item + SEP + store;
    let i = this.index.get(k);
    if (i === undefined) {
      i = this.data.itemIds.length;
      this.data.itemIds.push(item);
      this.data.storeIds.push(store);
      this.data.seriesIds.push(this.data.nextId++);
      this.index.set(k, i);
    }
    return i;
  }
}

const keyText = (item: string, store: string, day: number) => JSON.stringify([item, store, formatDay(day)]);

export class SalesEncoder implements RowEncoder {
  private readonly seen = new DayBits();
  private readonly days = new DayParser();
  private readonly iItem: number;
  private readonly iStore: number;
  private readonly iDay: number;
  private readonly iUnits: number;
  private lastItem: string | null = null;
  private lastStore: string | null = null;
  private lastPos = -1;
  private readonly cellDays: Int32Array;
  private readonly cellUnits: Int32Array;

  constructor(
    private readonly ctx: EncodeContext,
    private readonly plan: HeaderPlan,
    private readonly series: SeriesLookup,
  ) {
    this.iItem = plan.index.item_id!;
    this.iStore = plan.index.store_id!;
    this.iDay = plan.index.day ?? -1;
    this.iUnits = plan.index.units ?? -1;
    this.cellDays = new Int32Array(plan.days.length);
    this.cellUnits = new Int32Array(plan.days.length);
  }

  record(f: string[], line: number, start: number, end: number): undefined {
    const ctx = this.ctx;
    if (f.length !== this.plan.fieldCount)
      return ctx.reject(line, ragged(this.plan.fieldCount, f.length), start, end);
    const item = f[this.iItem]!;
    const store = f[this.iStore]!;
    if (item !== this.lastItem || store !== this.lastStore) {
      const p = textProblem(item);
      if (p) return ctx.reject(line, `item_id ${p}`, start, end);
      const q = textProblem(store);
      if (q) return ctx.reject(line, `store_id ${q}`, start, end);
      this.lastItem = item;
      this.lastStore = store;
      this.lastPos = -1; // resolved once the row is known to be valid
    }
    if (this.plan.layout === 'wide') return this.wide(f, item, store, line, start, end);
    const day = this.days.parse(f[this.iDay]!);
    if (Number.isNaN(day)) return ctx.reject(line, `day ${dayProblem(f[this.iDay]!)}`, start, end);
    const units = parseUnits(f[this.iUnits]!);
    if (Number.isNaN(units)) return ctx.reject(line, `units ${unitsProblem(f[this.iUnits]!)}`, start, end);
    if (this.lastPos < 0) this.lastPos = this.series.position(item, store);
    const pos = this.lastPos;
    if (this.seen.testAndSet(pos, day)) {
      return ctx.reject(line, 'duplicate key', start, end, {
        key: keyText(item, store, day),
        dup: { prefix: item + SEP + store, day },
      });
    }
    ctx.accepted?.(item + SEP + store, day, line);
    ctx.noteDay(day);
    const w = ctx.writer;
    if (w === null) return;
    const sid = this.series.data.seriesIds[pos]!;
    if (ctx.staged) {
      w.row(4);
      w.int4(sid);
      w.date(day);
      w.int4(units);
      w.int8(line);
    } else {
      w.row(3);
      w.int4(sid);
      w.date(day);
      w.int4(units);
    }
    ctx.rowsWritten++;
  }

  /** A wide line is one unit: any bad cell rejects the whole line, so no series is half stored. */
  private wide(
    f: string[],
    item: string,
    store: string,
    line: number,
    start: number,
    end: number,
  ): undefined {
    const ctx = this.ctx;
    const { dayPositions, days } = this.plan;
    let n = 0;
    for (let c = 0; c < dayPositions.length; c++) {
      const cell = f[dayPositions[c]!]!;
      if (cell === '') continue; // an empty cell is no row
      const u = parseUnits(cell);
      if (Number.isNaN(u)) {
        const problem = cell.trim() === '' ? 'is blank' : unitsProblem(cell);
        return ctx.reject(line, `units in column ${formatDay(days[c]!)} ${problem}`, start, end);
      }
      this.cellDays[n] = days[c]!;
      this.cellUnits[n++] = u;
    }
    if (this.lastPos < 0) this.lastPos = this.series.position(item, store);
    const pos = this.lastPos;
    for (let k = 0; k < n; k++) {
      const day = this.cellDays[k]!;
      if (this.seen.has(pos, day)) {
        return ctx.reject(line, `duplicate key (day ${formatDay(day)} of this item and store)`, start, end, {
          key: keyText(item, store, day),
          dup: { prefix: item + SEP + store, day },
        });
      }
    }
    const sid = this.series.data.seriesIds[pos]!;
    const w = ctx.writer;
    for (let k = 0; k < n; k++) {
      const day = this.cellDays[k]!;
      this.seen.testAndSet(pos, day);
      ctx.accepted?.(item + SEP + store, day, line);
      ctx.noteDay(day);
      if (w === null) continue;
      w.row(ctx.staged ? 4 : 3);
      w.int4(sid);
      w.date(day);
      w.int4(this.cellUnits[k]!);
      if (ctx.staged) w.int8(line);
      ctx.rowsWritten++;
    }
  }
}
