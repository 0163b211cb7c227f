/**
 * A minimal reader of PostgreSQL's binary COPY format (docs: "COPY", Binary Format) that hands
 * each field over as raw bytes: for results with bytea columns, which the columnar reader in
 * src/db/binary-copy.ts does not decode. Fields are subarrays, valid until the next row.
 */
const SIGNATURE = Buffer.from([0x50, 0x47, 0x43, 0x4f, 0x50, 0x59, 0x0a, 0xff, 0x0d, 0x0a, 0x00]);

export async function* readRawCopy(source: AsyncIterable<Uint8Array>): AsyncGenerator<Array<Buffer | null>> {
  let pending: Buffer = Buffer.alloc(0);
  let headerDone = false;
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
    for (;;) {
      if (p + 2 > pending.length) break;
      const fields = pending.readInt16BE(p);
      if (fields === -1) return;
      let q = p + 2;
      const row: Array<Buffer | null> = [];
      let complete = true;
      for (let f = 0; f < fields; f++) {
        if (q + 4 > pending.length) {
          complete = false;
          break;
        }
        const len = pending.readInt32BE(q);
        q += 4;
        if (len < 0) {
          row.push(null);
          continue;
        }
        if (q + len > pending.length) {
          complete = false;
          break;
        }
        row.push(pending.subarray(q, q + len));
        q += len;
      }
      if (!complete) break;
      p = q;
      yield row;
    }
    pending = p < pending.length ? Buffer.from(pending.subarray(p)) : Buffer.alloc(0);
  }
  if (headerDone) throw new Error('binary COPY stream ended without its trailer');
}

/** Rows of text and bytea fields in binary COPY format, in chunks of about `chunkSize` bytes. */
export class RawCopyWriter {
  private parts: Buffer[] = [Buffer.concat([SIGNATURE, Buffer.alloc(8)])];
  private size = 19;

  constructor(private readonly chunkSize = 1 << 20) {}

  /** One row; strings are written as UTF-8 text, byte arrays as they are, null as NULL. */
  row(fields: ReadonlyArray<string | Uint8Array | null>): void {
    const head = Buffer.allocUnsafe(2);
    head.writeInt16BE(fields.length, 0);
    this.push(head);
    for (const f of fields) {
      const len = Buffer.allocUnsafe(4);
      if (f === null) {
        len.writeInt32BE(-1, 0);
        this.push(len);
        continue;
      }
      const bytes =
        typeof f === 'string' ? Buffer.from(f, 'utf8') : Buffer.from(f.buffer, f.byteOffset, f.byteLength);
      len.writeInt32BE(bytes.length, 0);
      this.push(len);
      this.push(bytes);
    }
  }

  private push(b: Buffer): void {
    this.parts.push(b);
    this.size += b.length;
  }

  /** Completed chunks (call between rows to stream). */
  take(): Buffer[] {
    if (this.size < this.chunkSize) return [];
    const out = Buffer.concat(this.parts);
    this.parts = [];
    this.size = 0;
    return [out];
  }

  /** The trailer and whatever is left. */
  end(): Buffer[] {
    const t = Buffer.allocUnsafe(2);
    t.writeInt16BE(-1, 0);
    this.push(t);
    const out = Buffer.concat(this.parts);
    this.parts = [];
    this.size = 0;
    return [out];
  }
}
