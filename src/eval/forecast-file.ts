import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { formatDay, parseDay } from '../core/days.js';
import { InputError } from '../db/errors.js';
import { CsvRecords } from '../load/csv-records.js';
import { KEY_SEPARATOR } from './hierarchy-levels.js';

/**
 * Bottom-level forecasts (`item_id, store_id, day, value`) read from CSV or Parquet and checked
 * against the series being evaluated and the horizon. Every problem is collected in one pass and
 * reported together, first offenders of each kind with their line (CSV) or row (Parquet).
 */
export const FORECAST_COLUMNS = ['item_id', 'store_id', 'day', 'value'] as const;

export interface RawForecast {
  /** 1-based line of the CSV record, or 1-based row of the Parquet file. */
  readonly line: number;
  readonly item: unknown;
  readonly store: unknown;
  readonly day: unknown;
  readonly value: unknown;
  /** Set when the row could not be split into the four fields. */
  readonly problem?: string;
}

export interface ForecastSource {
  readonly path: string;
  readonly kind: 'csv' | 'parquet';
  /** 'line' for CSV, 'row' for Parquet: what `RawForecast.line` counts. */
  readonly unit: 'line' | 'row';
  readonly sha256: string;
  /** Calls `visit` for every data row, in file order. */
  each(visit: (r: RawForecast) => void): Promise<void>;
}

/** Opens a forecast file by extension (.csv, .parquet / .pq). */
export function openForecastFile(path: string): ForecastSource {
  const lower = path.toLowerCase();
  let bytes: Buffer;
  try {
    bytes = readFileSync(path);
  } catch (err) {
    throw new InputError(`${path}: cannot read forecasts file: ${(err as Error).message}`, { cause: err });
  }
  const sha256 = createHash('sha256').update(bytes).digest('hex');
  if (lower.endsWith('.csv') || lower.endsWith('.csv.gz')) {
    return { path, kind: 'csv', unit: 'line', sha256, each: (visit) => csvRows(path, visit) };
  }
  if (lower.endsWith('.parquet') || lower.endsWith('.pq')) {
    return { path, kind: 'parquet', unit: 'row', sha256, each: (visit) => parquetRows(path, bytes, visit) };
  }
  throw new InputError(`${path}: forecasts must be a .csv or .parquet file`);
}

function checkHeader(path: string, columns: readonly string[]): void {
  const missing = FORECAST_COLUMNS.filter((c) => !columns.includes(c));
  const extra = columns.filter((c) => !(FORECAST_COLUMNS as readonly string[]).includes(c));
  if (missing.length || extra.length) {
    const parts = [
      missing.length ? `missing column(s) ${missing.join(', ')}` : '',
      extra.length ? `unexpected column(s) ${extra.join(', ')}` : '',
    ].filter(Boolean);
    throw new InputError(`${path}: ${parts.join('; ')} (expected exactly ${FORECAST_COLUMNS.join(', ')})`);
  }
}

/**
 * CSV through the loader's record reader (plain or gzip, UTF-8 checked, delimiter sniffed, exact
 * physical line numbers). A row with the wrong number of fields is reported like a bad value.
 */
async function csvRows(path: string, visit: (r: RawForecast) => void): Promise<void> {
  let at: number[] | undefined;
  let width = 0;
  await new CsvRecords(path).read((fields, line) => {
    if (!at) {
      const header = fields.map((h) => h.trim());
      checkHeader(path, header);
      at = FORECAST_COLUMNS.map((c) => header.indexOf(c));
      width = header.length;
      return;
    }
    if (fields.length !== width) {
      const problem = `${fields.length} field(s), expected ${width}`;
      visit({ line, item: fields[at[0]!], store: fields[at[1]!], day: undefined, value: undefined, problem });
      return;
    }
    // Ids are compared exactly as written; days and values are trimmed where they are parsed.
    visit({ line, item: fields[at[0]!], store: fields[at[1]!], day: fields[at[2]!], value: fields[at[3]!] });
  });
}

async function parquetRows(path: string, bytes: Buffer, visit: (r: RawForecast) => void): Promise<void> {
  const { parquetMetadata, parquetReadObjects } = await import('hyparquet');
  const file = bytes.buffer.slice(bytes.byteOffset, bytes.byteOffset + bytes.byteLength) as ArrayBuffer;
  let names: string[];
  try {
    names = parquetMetadata(file)
      .schema.slice(1)
      .map((s) => s.name);
  } catch (err) {
    throw new InputError(`${path}: not a Parquet file: ${(err as Error).message}`, { cause: err });
  }
  checkHeader(path, names);
  // The forecasts of a whole chain are tens of thousands of series x H days: they fit in memory.
  const rows = await parquetReadObjects({ file, columns: [...FORECAST_COLUMNS] });
  let line = 0;
  for (const r of rows) {
    line++;
    visit({ line, item: r.item_id, store: r.store_id, day: r.day, value: r.value });
  }
}

/** The series forecasts are expected for, in a fixed order, and the horizon's days. */
export interface ForecastFrame {
  /** `item_id + U+001F + store_id` -> bottom series index. */
  readonly index: ReadonlyMap<string, number>;
  readonly cutoff: number;
  /** Horizon H, or undefined to take it from the file (the largest day minus the cutoff). */
  readonly horizon: number | undefined;
}

export interface ForecastMatrix {
  readonly horizon: number;
  /** `horizon` values per bottom series, row-major in the frame's index order. */
  readonly values: Float64Array;
  readonly rows: number;
}

const FIRST = 5;

class Offenders {
  readonly list: string[] = [];
  count = 0;
  add(msg: string): void {
    this.count++;
    if (this.list.length < FIRST) this.list.push(msg);
  }
}

function toDay(v: unknown): number | null {
  if (typeof v === 'string') return parseDay(v.trim());
  // hyparquet gives DATE columns as Date at UTC midnight.
  if (v instanceof Date && !Number.isNaN(v.getTime())) {
    const ms = v.getTime();
    return ms % 86_400_000 === 0 ? ms / 86_400_000 : null;
  }
  return null;
}

function toNumber(v: unknown): number {
  if (typeof v === 'number') return v;
  if (typeof v === 'bigint') return Number(v);
  if (typeof v === 'string' && v.trim() !== '') return Number(v);
  return Number.NaN;
}

/**
 * Reads and checks every row: unknown series, days outside C+1..C+H, duplicates, missing cells,
 * negative or non-numeric values. Throws one InputError listing the first offenders of each kind.
 */
export async function readForecasts(source: ForecastSource, frame: ForecastFrame): Promise<ForecastMatrix> {
  const where = (line: number) => `${source.path}:${source.unit === 'line' ? '' : 'row '}${line}`;
  const bad = {
    format: new Offenders(),
    negative: new Offenders(),
    outside: new Offenders(),
    extra: new Offenders(),
    duplicate: new Offenders(),
  };
  // Rows are parsed once into compact arrays; the horizon may only be known at the end.
  const seriesOf: number[] = [];
  const offsetOf: number[] = [];
  const cellValue: number[] = [];
  const lineOf: number[] = [];
  let maxOffset = 0;
  await source.each((r) => {
    const item = typeof r.item === 'string' ? r.item : r.item == null ? '' : String(r.item);
    const store = typeof r.store === 'string' ? r.store : r.store == null ? '' : String(r.store);
    const key = `${item}/${store}`;
    if (r.problem !== undefined) {
      bad.format.add(`${where(r.line)} ${key}: ${r.problem}`);
      return;
    }
    const d = toDay(r.day);
    const v = toNumber(r.value);
    if (d === null) {
      bad.format.add(`${where(r.line)} ${key}: day '${String(r.day)}' is not a valid day (YYYY-MM-DD)`);
      return;
    }
    if (!Number.isFinite(v)) {
      bad.format.add(
        `${where(r.line)} ${key} ${formatDay(d)}: value '${String(r.value)}' is not a finite number`,
      );
      return;
    }
    if (v < 0) bad.negative.add(`${where(r.line)} ${key} ${formatDay(d)}: negative value ${v}`);
    const off = d - frame.cutoff;
    const h = frame.horizon;
    if (off < 1 || (h !== undefined && off > h)) {
      const span =
        h === undefined
          ? `after the cutoff ${formatDay(frame.cutoff)}`
          : `${formatDay(frame.cutoff + 1)}..${formatDay(frame.cutoff + h)}`;
      bad.outside.add(`${where(r.line)} ${key}: day ${formatDay(d)} is outside the horizon ${span}`);
      return;
    }
    const s = frame.index.get(`${item}${KEY_SEPARATOR}${store}`);
    if (s === undefined) {
      bad.extra.add(
        `${where(r.line)} ${key}: not an evaluated series (unknown, or no sale on or before the cutoff)`,
      );
      return;
    }
    seriesOf.push(s);
    offsetOf.push(off);
    cellValue.push(v);
    lineOf.push(r.line);
    if (off > maxOffset) maxOffset = off;
  });
  const horizon = frame.horizon ?? maxOffset;
  const n = frame.index.size;
  const values = new Float64Array(n * horizon).fill(Number.NaN);
  const firstLine = new Float64Array(n * horizon);
  const keys = new Array<string>(n);
  for (const [k, i] of frame.index) keys[i] = k.split(KEY_SEPARATOR).join('/');
  for (let i = 0; i < seriesOf.length; i++) {
    const cell = seriesOf[i]! * horizon + offsetOf[i]! - 1;
    if (!Number.isNaN(values[cell]!)) {
      const day = formatDay(frame.cutoff + offsetOf[i]!);
      bad.duplicate.add(
        `${where(lineOf[i]!)} ${keys[seriesOf[i]!]} ${day}: duplicate of ${source.unit} ${firstLine[cell]}`,
      );
      continue;
    }
    values[cell] = cellValue[i]!;
    firstLine[cell] = lineOf[i]!;
  }
  const missing = new Offenders();
  if (horizon > 0) {
    for (let cell = 0; cell < values.length; cell++) {
      if (!Number.isNaN(values[cell]!)) continue;
      missing.add(`${keys[Math.floor(cell / horizon)]} ${formatDay(frame.cutoff + (cell % horizon) + 1)}`);
    }
  }
  const sections: string[] = [];
  const section = (title: string, o: Offenders) => {
    if (o.count === 0) return;
    const more = o.count > o.list.length ? `\n    ... and ${o.count - o.list.length} more` : '';
    sections.push(`  ${title} (${o.count}):\n    ${o.list.join('\n    ')}${more}`);
  };
  section('unreadable rows', bad.format);
  section('negative values', bad.negative);
  section('days outside the horizon', bad.outside);
  section('extra rows (series not evaluated)', bad.extra);
  section('duplicate rows', bad.duplicate);
  section('missing rows (series and day without a forecast)', missing);
  if (horizon === 0 && sections.length === 0) sections.push('  no forecast rows');
  if (sections.length) {
    throw new InputError(`${source.path}: forecasts refused, nothing was written:\n${sections.join('\n')}`);
  }
  return { horizon, values, rows: seriesOf.length };
}
