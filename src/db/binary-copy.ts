/**
 * PostgreSQL's binary COPY format (docs: "COPY", File Formats / Binary Format), written and read
 * without per-row allocations. Binary is used on the hot paths because text output was measured
 * 2.5x slower for the build's write-back.
 *
 * Days are carried as epoch days (days since 1970-01-01); binary `date` counts from 2000-01-01.
 */
export type CopyType = 'int2' | 'int4' | 'int8' | 'float4' | 'float8' | 'date' | 'bool' | 'text';

const SIGNATURE = Uint8Array.from([0x50, 0x47, 0x43, 0x4f, 0x50, 0x59, 0x0a, 0xff, 0x0d, 0x0a, 0x00]);
/** Days from 1970-01-01 to 2000-01-01. */
export const PG_EPOCH_DAYS = 10957;
const encoder = new TextEncoder();

/** Builds a binary COPY stream in chunks of about `chunkSize` bytes. */
export class CopyBinaryWriter {
  private buf: Buffer;
  private pos = 0;
  private readonly chunkSize: number;
  private readonly ready: Uint8Array[] = [];

  constructor(chunkSize = 1 << 20) {
    this.chunkSize = chunkSize;
    this.buf = Buffer.allocUnsafe(chunkSize + 1024);
    this.buf.set(SIGNATURE, 0);
    this.buf.writeInt32BE(0, 11); // flags
    this.buf.writeInt32BE(0, 15); // header extension length
    this.pos = 19;
  }

  private ensure(n: number): void {
    if (this.pos + n <= this.buf.length) return;
    const next = Buffer.allocUnsafe(Math.max(this.buf.length * 2, this.pos + n));
    this.buf.copy(next, 0, 0, this.pos);
    this.buf = next;
  }

  /** Starts a tuple of `fields` columns. Call once per row, then one writer call per column. */
  row(fields: number): void {
    if (this.pos >= this.chunkSize) this.flush();
    this.ensure(2);
    this.buf.writeInt16BE(fields, this.pos);
    this.pos += 2;
  }

  null(): void {
    this.ensure(4);
    this.buf.writeInt32BE(-1, this.pos);
    this.pos += 4;
  }

  int2(v: number): void {
    this.ensure(6);
    this.buf.writeInt32BE(2, this.pos);
    this.buf.writeInt16BE(v, this.pos + 4);
    this.pos += 6;
  }

  int4(v: number): void {
    this.ensure(8);
    this.buf.writeInt32BE(4, this.pos);
    this.buf.writeInt32BE(v, this.pos + 4);
    this.pos += 8;
  }

  int8(v: number | bigint): void {
    this.ensure(12);
    this.buf.writeInt32BE(8, this.pos);
    this.buf.writeBigInt64BE(BigInt(v), this.pos + 4);
    this.pos += 12;
  }

  float4(v: number): void {
    this.ensure(8);
    this.buf.writeInt32BE(4, this.pos);
    this.buf.writeFloatBE(v, this.pos + 4);
    this.pos += 8;
  }

  /** A float8 cell; NaN is written as SQL NULL (features use NaN for "not computable"). */
  float8(v: number): void {
    if (Number.isNaN(v)) {
      this.null();
      return;
    }
    this.ensure(12);
    this.buf.writeInt32BE(8, this.pos);
    this.buf.writeDoubleBE(v, this.pos + 4);
    this.pos += 12;
  }

  /** A date from an epoch day. */
  date(epochDay: number): void {
    this.int4(epochDay - PG_EPOCH_DAYS);
  }

  bool(v: boolean): void {
    this.ensure(5);
    this.buf.writeInt32BE(1, this.pos);
    this.buf[this.pos + 4] = v ? 1 : 0;
    this.pos += 5;
  }

  /** A bytea value. */
  bytea(v: Uint8Array): void {
    this.ensure(4 + v.length);
    this.buf.writeInt32BE(v.length, this.pos);
    this.buf.set(v, this.pos + 4);
    this.pos += 4 + v.length;
  }

  text(v: string): void {
    const bytes = encoder.encode(v);
    this.ensure(4 + bytes.length);
    this.buf.writeInt32BE(bytes.length, this.pos);
    this.buf.set(bytes, this.pos + 4);
    this.pos += 4 + bytes.length;
  }

  private flush(): void {
    if (this.pos === 0) return;
    this.ready.push(Uint8Array.prototype.slice.call(this.buf, 0, this.pos));
    this.pos = 0;
  }

  /** Chunks completed so far (each a copy, safe to hand to a stream). */
  take(): Uint8Array[] {
    return this.ready.splice(0, this.ready.length);
  }

  /** Writes the trailer and returns the remaining chunks. */
  end(): Uint8Array[] {
    this.ensure(2);
    this.buf.writeInt16BE(-1, this.pos);
    this.pos += 2;
    this.flush();
    return this.take();
  }
}

export type Column = Int32Array | Float64Array | string[] | Uint8Array;

/** A columnar batch of decoded rows; `nulls[c][r]` is 1 where the cell was NULL. */
export interface CopyBatch {
  readonly length: number;
  readonly columns: readonly Column[];
  readonly nulls: readonly Uint8Array[];
}

function allocColumn(t: CopyType, n: number): Column {
  switch (t) {
    case 'int2':
    case 'int4':
    case 'date':
      return new Int32Array(n);
    case 'bool':
      return new Uint8Array(n);
    case 'text':
      return new Array<string>(n);
    default:
      return new Float64Array(n);
  }
}

const decoder = new TextDecoder();
/** Bytes of a non-NULL value of each type in binary COPY; 0 for variable width. */
const WIDTH: Record<CopyType, number> = {
  int2: 2,
  int4: 4,
  int8: 8,
  float4: 4,
  float8: 8,
  date: 4,
  bool: 1,
  text: 0,
};
const CODE: Record<CopyType, number> = {
  int2: 0,
  int4: 1,
  date: 2,
  int8: 3,
  float4: 4,
  float8: 5,
  bool: 6,
  text: 7,
};

/**
 * Decodes a binary COPY stream into columnar batches of up to `batchSize` rows. int2/int4/date
 * become Int32Array (dates as epoch days), int8/float4/float8 Float64Array, bool Uint8Array.
 * Batches are fresh arrays each time, so a consumer may keep them.
 */
export async function* readCopyBinary(
  source: AsyncIterable<Uint8Array>,
  types: readonly CopyType[],
  batchSize = 65536,
): AsyncGenerator<CopyBatch> {
  let pending: Buffer = Buffer.alloc(0);
  let headerDone = false;
  let done = false;
  const fresh = () => ({
    columns: types.map((t) => allocColumn(t, batchSize)),
    nulls: types.map(() => new Uint8Array(batchSize)),
  });
  let cur = fresh();
  let n = 0;
  const fixedMax = types.every((t) => WIDTH[t] > 0) ? types.reduce((a, t) => a + 4 + WIDTH[t], 2) : -1;
  const codes = Int8Array.from(types, (t) => CODE[t]);
  const widths = Int32Array.from(types, (t) => WIDTH[t]);

  for await (const chunk of source) {
    pending = pending.length
      ? Buffer.concat([pending, chunk])
      : Buffer.from(chunk.buffer, chunk.byteOffset, chunk.byteLength);
    let p = 0;
    if (!headerDone) {
      if (pending.length < 19) continue;
      if (!pending.subarray(0, 11).equals(SIGNATURE)) throw new Error('not a binary COPY stream');
      p = 19 + pending.readInt32BE(15);
      headerDone = true;
    }
    const buf = pending;
    const len = buf.length;
    // DataView reads were measured 12x faster than Buffer.readDoubleBE here (no per-call checks).
    const dv = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
    for (;;) {
      if (p + 2 > len) break;
      const fields = dv.getInt16(p);
      if (fields === -1) {
        done = true;
        p += 2;
        break;
      }
      if (fields !== types.length)
        throw new Error(`binary COPY row has ${fields} fields, expected ${types.length}`);
      // Make sure the whole tuple is buffered before decoding any of it (a row of fixed-width
      // fields is never longer than `fixedMax`, so away from the chunk's end no walk is needed).
      let q = p + 2;
      if (fixedMax < 0 || p + fixedMax > len) {
        let complete = true;
        for (let f = 0; f < fields; f++) {
          if (q + 4 > len) {
            complete = false;
            break;
          }
          const l = dv.getInt32(q);
          q += 4 + Math.max(l, 0);
          if (q > len) {
            complete = false;
            break;
          }
        }
        if (!complete) break;
        q = p + 2;
      }
      for (let f = 0; f < fields; f++) {
        const l = dv.getInt32(q);
        q += 4;
        const col = cur.columns[f]!;
        if (l < 0) {
          cur.nulls[f]![n] = 1;
          if (col instanceof Float64Array) col[n] = Number.NaN;
          continue;
        }
        const wd = widths[f]!;
        if (l !== wd && wd > 0)
          throw new Error(`binary COPY field ${f + 1} has ${l} bytes, a ${types[f]} has ${wd}`);
        // Numeric type codes (see CODE): a switch on small integers, not on strings, per field.
        switch (codes[f]) {
          case 0:
            (col as Int32Array)[n] = dv.getInt16(q);
            break;
          case 1:
            (col as Int32Array)[n] = dv.getInt32(q);
            break;
          case 2:
            (col as Int32Array)[n] = dv.getInt32(q) + PG_EPOCH_DAYS;
            break;
          case 3:
            (col as Float64Array)[n] = Number(dv.getBigInt64(q));
            break;
          case 4:
            (col as Float64Array)[n] = dv.getFloat32(q);
            break;
          case 5:
            (col as Float64Array)[n] = dv.getFloat64(q);
            break;
          case 6:
            (col as Uint8Array)[n] = buf[q]!;
            break;
          default:
            (col as string[])[n] = decoder.decode(buf.subarray(q, q + l));
            break;
        }
        q += l;
      }
      p = q;
      n++;
      if (n === batchSize) {
        yield { length: n, ...cur };
        cur = fresh();
        n = 0;
      }
    }
    pending = p < len ? buf.subarray(p) : Buffer.alloc(0);
    if (done) break;
  }
  if (!headerDone && pending.length === 0 && !done) return;
  if (!done) throw new Error('binary COPY stream ended without its trailer');
  if (n > 0)
    yield {
      length: n,
      columns: cur.columns.map((c) => c.slice(0, n) as Column),
      nulls: cur.nulls.map((x) => x.slice(0, n)),
    };
}

/**
 * Calls `tuple` for every row of a binary COPY stream of `fields` columns with any types (the
 * typed decoder above handles fixed types only): `at` holds each field's byte offset in `view`
 * and its length (-1 for NULL) as `[offset0, length0, offset1, ...]`, valid during the call.
 * Returns the number of rows.
 */
export async function readCopyTuples(
  source: AsyncIterable<Uint8Array>,
  fields: number,
  tuple: (view: DataView, bytes: Buffer, at: Int32Array) => void,
): Promise<number> {
  let pending: Buffer = Buffer.alloc(0);
  let header = false;
  let rows = 0;
  const at = new Int32Array(2 * fields);
  for await (const chunk of source) {
    pending = pending.length
      ? Buffer.concat([pending, chunk])
      : Buffer.from(chunk.buffer, chunk.byteOffset, chunk.byteLength);
    let p = 0;
    if (!header) {
      if (pending.length < 19) continue;
      if (!pending.subarray(0, 11).equals(SIGNATURE)) throw new Error('not a binary COPY stream');
      p = 19 + pending.readInt32BE(15);
      header = true;
    }
    const dv = new DataView(pending.buffer, pending.byteOffset, pending.byteLength);
    const len = pending.length;
    for (;;) {
      if (p + 2 > len) break;
      const n = dv.getInt16(p);
      if (n === -1) {
        p += 2;
        break;
      }
      if (n !== fields) throw new Error(`binary COPY row has ${n} fields, expected ${fields}`);
      // Only a wholly buffered tuple is handed on.
      let q = p + 2;
      let complete = true;
      for (let f = 0; f < fields; f++) {
        if (q + 4 > len) {
          complete = false;
          break;
        }
        const l = dv.getInt32(q);
        at[2 * f] = q + 4;
        at[2 * f + 1] = l;
        q += 4 + Math.max(l, 0);
        if (q > len) {
          complete = false;
          break;
        }
      }
      if (!complete) break;
      tuple(dv, pending, at);
      rows++;
      p = q;
    }
    pending = pending.subarray(p);
  }
  return rows;
}
