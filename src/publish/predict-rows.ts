import { PG_EPOCH_DAYS } from '../db/binary-copy.js';

/** A batch of prediction rows: `values` holds `features` float8 cells per row, NaN for NULL. */
export interface PredictRowBatch {
  readonly length: number;
  readonly seriesIds: Int32Array;
  /** Epoch days. */
  readonly days: Int32Array;
  readonly values: Float64Array;
}

const SIGNATURE = [0x50, 0x47, 0x43, 0x4f, 0x50, 0x59, 0x0a, 0xff, 0x0d, 0x0a, 0x00];

/**
 * Decodes `COPY (SELECT series_id, day, f1 .. fF ...) TO STDOUT (FORMAT binary)` (PostgreSQL docs,
 * "COPY", binary format) for this one fixed row shape, with a DataView over each chunk. The
 * general decoder in src/db/binary-copy.ts reads cell by cell through Buffer methods; for 40
 * float8 columns it was measured here at 7.5 s of 12 s for 840k rows, most of a publish, so
 * publish reads its rows with this specialised pass.
 */
export async function* readPredictRows(
  source: AsyncIterable<Uint8Array>,
  features: number,
  batchSize = 8192,
): AsyncGenerator<PredictRowBatch> {
  const fields = 2 + features;
  // The longest tuple: field count, two 4-byte columns, every feature present.
  const maxTuple = 2 + 2 * 8 + features * 12;
  let pending: Uint8Array = new Uint8Array(0);
  let headerDone = false;
  let done = false;
  let n = 0;
  let ids = new Int32Array(batchSize);
  let days = new Int32Array(batchSize);
  let values = new Float64Array(batchSize * features);
  const take = (): PredictRowBatch => {
    const out = {
      length: n,
      seriesIds: ids.subarray(0, n),
      days: days.subarray(0, n),
      values: values.subarray(0, n * features),
    };
    ids = new Int32Array(batchSize);
    days = new Int32Array(batchSize);
    values = new Float64Array(batchSize * features);
    n = 0;
    return out;
  };
  const bad = (what: string) => new Error(`binary COPY of prediction rows: ${what}`);

  const parse = (buf: Uint8Array, final: boolean): number => {
    const dv = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
    const len = buf.byteLength;
    let p = 0;
    if (!headerDone) {
      if (len < 19) return 0;
      for (let i = 0; i < SIGNATURE.length; i++)
        if (buf[i] !== SIGNATURE[i]) throw bad('not a binary COPY stream');
      p = 19 + dv.getInt32(15);
      headerDone = true;
    }
    // Decode whole tuples only: while a full-size tuple fits, or to the end on the last chunk.
    while (p + 2 <= len && (final || p + maxTuple <= len)) {
      const count = dv.getInt16(p);
      if (count === -1) {
        done = true;
        return p + 2;
      }
      if (count !== fields) throw bad(`a row has ${count} fields, expected ${fields}`);
      let q = p + 2;
      if (q + 16 > len) throw bad('truncated row');
      if (dv.getInt32(q) !== 4 || dv.getInt32(q + 8) !== 4) throw bad('series_id or day is NULL');
      ids[n] = dv.getInt32(q + 4);
      days[n] = dv.getInt32(q + 12) + PG_EPOCH_DAYS;
      q += 16;
      const base = n * features;
      for (let f = 0; f < features; f++) {
        const l = dv.getInt32(q);
        if (l === 8) {
          values[base + f] = dv.getFloat64(q + 4);
          q += 12;
        } else if (l === -1) {
          values[base + f] = Number.NaN;
          q += 4;
        } else {
          throw bad(`feature column ${f + 1} has ${l} bytes, expected a float8`);
        }
      }
      if (q > len) throw bad('truncated row');
      p = q;
      if (++n === batchSize) break;
    }
    return p;
  };

  for await (const chunk of source) {
    let buf: Uint8Array;
    if (pending.byteLength) {
      buf = new Uint8Array(pending.byteLength + chunk.byteLength);
      buf.set(pending, 0);
      buf.set(chunk, pending.byteLength);
    } else {
      buf = chunk;
    }
    let p = 0;
    for (;;) {
      p += parse(buf.subarray(p), false);
      if (n === batchSize) yield take();
      else break;
      if (done) break;
    }
    pending = buf.slice(p);
    if (done) break;
  }
  if (!done) {
    let p = 0;
    for (;;) {
      p += parse(pending.subarray(p), true);
      if (n === batchSize) yield take();
      else break;
      if (done) break;
    }
    if (!headerDone && pending.byteLength === 0) return;
    if (!done) throw bad('stream ended without its trailer');
  }
  if (n > 0) yield take();
}

/** A COPY stream that can be read to its end after its consumer stopped early. */
export interface DrainableSource extends AsyncIterable<Uint8Array> {
  /** Reads and drops whatever is left, so the connection leaves COPY mode cleanly. */
  drain(): Promise<void>;
}

/**
 * Wraps a `COPY ... TO STDOUT` stream so that a consumer that stops early (a bad row found
 * mid-stream) does not abandon the COPY: the connection must read the stream to its end before it
 * can run the next statement (here, recording the failure), so an early exit only pauses it and
 * `drain()` finishes it.
 */
export function drainable(source: AsyncIterable<Uint8Array>): DrainableSource {
  const it = source[Symbol.asyncIterator]();
  let finished = false;
  return {
    [Symbol.asyncIterator]() {
      return {
        async next() {
          const r = await it.next();
          if (r.done) finished = true;
          return r;
        },
        // Not forwarded: returning the underlying iterator would give the connection back mid-COPY.
        async return() {
          return { done: true as const, value: undefined };
        },
      };
    },
    async drain() {
      while (!finished) if ((await it.next()).done) finished = true;
    },
  };
}
