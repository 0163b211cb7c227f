import { formatDay } from '../core/days.js';
import { type SeriesIds, unknownSeries } from './arrow-batch.js';
import type { ExportLayout } from './export-layout.js';
import type { HashingFile } from './hashing-file.js';
import type { ExportBatch } from './snapshot-reader.js';

/** RFC 4180 quoting where needed; ids hold no control characters but may hold commas or quotes. */
export function csvField(v: string): string {
  return /[",\r\n]/.test(v) || v !== v.trim() || v === '' ? `"${v.replaceAll('"', '""')}"` : v;
}

/**
 * CSV with a header row. NULL is an empty field; floats are written in the shortest form that
 * reads back to the same double (ECMAScript Number-to-String), days as ISO 8601, booleans as
 * true/false. Deterministic: no locale, no timestamps.
 */
export class CsvSink {
  private readonly item = new Map<number, string>();
  private readonly store = new Map<number, string>();
  private readonly days = new Map<number, string>();
  private readonly encoder = new TextEncoder();

  constructor(
    private readonly file: HashingFile,
    private readonly layout: ExportLayout,
    ids: SeriesIds,
  ) {
    for (const [sid, v] of ids.itemText) this.item.set(sid, csvField(v));
    for (const [sid, v] of ids.storeText) this.store.set(sid, csvField(v));
    file.write(this.encoder.encode(`${layout.columns.map((c) => csvField(c.name)).join(',')}\n`));
  }

  private day(d: number): string {
    let s = this.days.get(d);
    if (s === undefined) {
      s = formatDay(d);
      this.days.set(d, s);
    }
    return s;
  }

  write(b: ExportBatch): void {
    const types = this.layout.copyTypes;
    const sid = b.columns[0] as Int32Array;
    const parts: string[] = new Array(b.length);
    const cells: string[] = new Array(types.length + 1);
    for (let r = 0; r < b.length; r++) {
      const s = sid[r]!;
      const item = this.item.get(s);
      if (item === undefined) throw unknownSeries(s);
      cells[0] = item;
      cells[1] = this.store.get(s)!;
      for (let c = 1; c < types.length; c++) {
        if (b.nulls[c]![r]) {
          cells[c + 1] = '';
          continue;
        }
        const col = b.columns[c]!;
        switch (types[c]) {
          case 'date':
            cells[c + 1] = this.day((col as Int32Array)[r]!);
            break;
          case 'bool':
            cells[c + 1] = (col as Uint8Array)[r] ? 'true' : 'false';
            break;
          default:
            cells[c + 1] = String((col as Int32Array | Float64Array)[r]!);
        }
      }
      parts[r] = cells.join(',');
    }
    if (b.length) this.file.write(this.encoder.encode(`${parts.join('\n')}\n`));
  }

  async finish(): Promise<void> {}
}
