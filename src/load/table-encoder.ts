/**
 * Rows of the text-keyed raw tables (items, stores, calendar, events, benefit days, prices),
 * validated per column kind and written with their line number for the staging table.
 */
import { formatDay } from '../core/days.js';
import { DayBits } from './day-bits.js';
import { type EncodeContext, type RowEncoder, ragged } from './encode-context.js';
import { DayParser, dayProblem, MAX_NAME_LENGTH, parsePriceE4, priceProblem, textProblem } from './fields.js';
import type { HeaderPlan } from './header.js';
import type { ColumnSpec, TargetSpec } from './targets.js';

const SEP = '\u0000';

export class TableEncoder implements RowEncoder {
  private readonly cols: readonly ColumnSpec[];
  private readonly pos: number[];
  private readonly days = new DayParser();
  /** Keys with a day: one bitset of days per key prefix. Keys without: first line per key. */
  private readonly bits = new DayBits();
  private readonly prefixes = new Map<string, number>();
  private readonly lines = new Map<string, number>();
  private readonly dayCol: number;
  private readonly noteCol: number;
  private readonly values: Array<string | number | null>;

  constructor(
    private readonly ctx: EncodeContext,
    private readonly plan: HeaderPlan,
    spec: TargetSpec,
  ) {
    this.cols = spec.columns;
    this.pos = this.cols.map((c) => plan.index[c.name]!);
    this.dayCol = this.cols.findIndex((c) => c.inKey && c.kind === 'day');
    this.noteCol = this.cols.findIndex((c) => c.name === spec.dayColumn);
    this.values = new Array(this.cols.length).fill(null);
  }

  record(f: string[], line: number, start: number, end: number): undefined {
    const ctx = this.ctx;
    if (f.length !== this.plan.fieldCount)
      return ctx.reject(line, ragged(this.plan.fieldCount, f.length), start, end);
    const v = this.values;
    for (let c = 0; c < this.cols.length; c++) {
      const col = this.cols[c]!;
      const raw = f[this.pos[c]!]!;
      switch (col.kind) {
        case 'id':
        case 'name': {
          const p = textProblem(raw, col.kind === 'name' ? MAX_NAME_LENGTH : undefined);
          if (p) return ctx.reject(line, `${col.name} ${p}`, start, end);
          v[c] = raw;
          break;
        }
        case 'attr': {
          if (raw === '') {
            v[c] = null;
            break;
          }
          const p = textProblem(raw);
          if (p) return ctx.reject(line, `${col.name} ${p}`, start, end);
          v[c] = raw;
          break;
        }
        case 'day': {
          const d = this.days.parse(raw);
          if (Number.isNaN(d)) return ctx.reject(line, `${col.name} ${dayProblem(raw)}`, start, end);
          v[c] = d;
          break;
        }
        case 'price': {
          const p = parsePriceE4(raw);
          if (Number.isNaN(p)) return ctx.reject(line, `${col.name} ${priceProblem(raw)}`, start, end);
          v[c] = p;
          break;
        }
        case 'units':
          throw new Error('units columns are sales-only');
      }
    }
    let prefix = '';
    for (let c = 0; c < this.cols.length; c++) {
      if (!this.cols[c]!.inKey || c === this.dayCol) continue;
      prefix = prefix === '' ? (v[c] as string) : prefix + SEP + (v[c] as string);
    }
    const day = this.dayCol >= 0 ? (v[this.dayCol] as number) : 0;
    if (this.dayCol >= 0) {
      let k = this.prefixes.get(prefix);
      if (k === undefined) {
        k = this.prefixes.size;
        this.prefixes.set(prefix, k);
      }
      if (this.bits.testAndSet(k, day)) {
        return ctx.reject(line, 'duplicate key', start, end, { key: this.keyText(), dup: { prefix, day } });
      }
    } else {
      const first = this.lines.get(prefix);
      if (first !== undefined) {
        return ctx.reject(line, 'duplicate key', start, end, { key: this.keyText(), otherLine: first });
      }
      this.lines.set(prefix, line);
    }
    ctx.accepted?.(prefix, day, line);
    if (this.noteCol >= 0) ctx.noteDay(v[this.noteCol] as number);
    const w = ctx.writer;
    if (w === null) return;
    w.row(this.cols.length + (ctx.staged ? 1 : 0));
    for (let c = 0; c < this.cols.length; c++) {
      const x = v[c];
      if (x === null) w.null();
      else if (this.cols[c]!.kind === 'day') w.date(x as number);
      else if (this.cols[c]!.kind === 'price') w.int8(x as number);
      else w.text(x as string);
    }
    if (ctx.staged) w.int8(line);
    ctx.rowsWritten++;
  }

  private keyText(): string {
    const key: Array<string | null> = [];
    this.cols.forEach((c, i) => {
      if (!c.inKey) return;
      const x = this.values[i]!;
      key.push(c.kind === 'day' ? formatDay(x as number) : (x as string));
    });
    return JSON.stringify(key);
  }
}
