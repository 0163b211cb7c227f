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
