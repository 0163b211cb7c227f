import {
  Bool,
  type Data,
  DateDay,
  type DataType,
  Field,
  Float64,
  Int32,
  makeData,
  RecordBatch,
  Schema,
  Struct,
  Utf8,
} from 'apache-arrow';
import { LarderError } from '../db/errors.js';
import type { ExportColumn, ExportType } from './export-layout.js';
import type { ExportBatch } from './snapshot-reader.js';

/** Item and store ids of each series, pre-encoded as UTF-8 for the id columns. */
export interface SeriesIds {
  readonly item: ReadonlyMap<number, Uint8Array>;
  readonly store: ReadonlyMap<number, Uint8Array>;
  readonly itemText: ReadonlyMap<number, string>;
  readonly storeText: ReadonlyMap<number, string>;
}

const encoder = new TextEncoder();

/** Builds the id maps from `(series_id, item_id, store_id)` rows. */
export function seriesIds(
  rows: ReadonlyArray<{ series_id: number; item_id: string; store_id: string }>,
): SeriesIds {
  const item = new Map<number, Uint8Array>();
  const store = new Map<number, Uint8Array>();
  const itemText = new Map<number, string>();
  const storeText = new Map<number, string>();
  for (const r of rows) {
    item.set(r.series_id, encoder.encode(r.item_id));
    store.set(r.series_id, encoder.encode(r.store_id));
    itemText.set(r.series_id, r.item_id);
    storeText.set(r.series_id, r.store_id);
  }
  return { item, store, itemText, storeText };
}

/** Thrown when a snapshot row names a series the `series` table does not have. */
export function unknownSeries(seriesId: number): LarderError {
  return new LarderError(
    'SNAPSHOT_SERIES',
    `snapshot row refers to series_id ${seriesId}, which is not in series`,
  );
}

function arrowType(t: ExportType): DataType {
  switch (t) {
    case 'text':
      return new Utf8();
    case 'date':
      return new DateDay();
    case 'bool':
      return new Bool();
    case 'int4':
      return new Int32();
    case 'float8':
      return new Float64();
  }
}

/** The Arrow schema of an export; manifest types map 1:1 (text Utf8, date Date32, ...). */
export function arrowSchema(columns: readonly ExportColumn[]): Schema {
  return new Schema(columns.map((c) => new Field(c.name, arrowType(c.type), c.nullable)));
}

function validity(nulls: Uint8Array, n: number): { bitmap: Uint8Array | undefined; count: number } {
  let count = 0;
  for (let i = 0; i < n; i++) count += nulls[i]!;
  if (count === 0) return { bitmap: undefined, count };
  const bitmap = new Uint8Array((n + 7) >> 3);
  for (let i = 0; i < n; i++) if (nulls[i] === 0) bitmap[i >> 3]! |= 1 << (i & 7);
  return { bitmap, count };
}

function utf8(ids: ReadonlyMap<number, Uint8Array>, sid: Int32Array, n: number): Data<Utf8> {
  const offsets = new Int32Array(n + 1);
  let bytes = 0;
  for (let i = 0; i < n; i++) {
    const id = ids.get(sid[i]!);
    if (id === undefined) throw unknownSeries(sid[i]!);
    bytes += id.length;
    offsets[i + 1] = bytes;
  }
  const data = new Uint8Array(bytes);
  for (let i = 0; i < n; i++) data.set(ids.get(sid[i]!)!, offsets[i]!);
  return makeData({ type: new Utf8(), length: n, valueOffsets: offsets, data });
}

function bits(values: Uint8Array, n: number): Uint8Array {
  const out = new Uint8Array((n + 7) >> 3);
  for (let i = 0; i < n; i++) if (values[i]) out[i >> 3]! |= 1 << (i & 7);
  return out;
}

/**
 * One Arrow record batch from decoded snapshot rows. Numeric buffers are used as they are (the
 * decoder hands out fresh arrays per batch); only validity bitmaps and the id strings are built.
 */
export function toRecordBatch(schema: Schema, ids: SeriesIds, b: ExportBatch): RecordBatch {
  const n = b.length;
  const sid = b.columns[0] as Int32Array;
  const children: Data[] = [utf8(ids.item, sid, n), utf8(ids.store, sid, n)];
  // Table columns after series_id line up with export columns after item_id and store_id.
  for (let c = 1; c < b.columns.length; c++) {
    const field = schema.fields[c + 1]!;
    const col = b.columns[c]!;
    const v = validity(b.nulls[c]!, n);
    const nullBitmap = v.bitmap;
    const nullCount = v.count;
    if (field.type instanceof Bool) {
      children.push(
        makeData({ type: field.type, length: n, data: bits(col as Uint8Array, n), nullBitmap, nullCount }),
      );
    } else {
      children.push(
        makeData({
          type: field.type,
          length: n,
          data: col as Int32Array | Float64Array,
          nullBitmap,
          nullCount,
        }),
      );
    }
  }
  return new RecordBatch(
    schema,
    makeData({ type: new Struct(schema.fields), length: n, children, nullCount: 0 }),
  );
}
