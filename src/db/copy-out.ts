import type { Duplex } from 'node:stream';
import type pg from 'pg';

/**
 * `COPY ... TO STDOUT` read straight off the connection's socket (frontend/backend protocol,
 * docs: "Message Flow", COPY Operations). The server sends one CopyData message per row; a
 * general stream reader pays a Buffer per message, which was about a quarter of the build's
 * CPU. Here each socket chunk is compacted in place (the 5-byte message headers squeezed out)
 * and handed on as one payload chunk, so a 64 kB read costs one view whatever its row count.
 *
 * While the COPY runs, the socket's data goes to this reader instead of node-postgres' parser;
 * at CopyDone or an ErrorResponse the rest of the chunk is given back to that parser, which
 * then reports CommandComplete / the error and ReadyForQuery to this query as to any other.
 */

const COPY_DATA = 0x64; // 'd'
const COPY_DONE = 0x63; // 'c'
// Messages the server may send during COPY OUT besides CopyData (skipped).
const COPY_OUT_RESPONSE = 0x48; // 'H'
const NOTICE = 0x4e; // 'N'
const PARAMETER_STATUS = 0x53; // 'S'
const NOTIFICATION = 0x41; // 'A'

interface Connection {
  readonly stream: Duplex;
  query(text: string): void;
}

type DataHandler = (chunk: Buffer) => void;

/** A node-postgres submittable that owns the socket for the length of one COPY OUT. */
class CopyOutQuery {
  rowCount = 0;
  private stream: Duplex | null = null;
  private pgData: DataHandler | null = null;
  private failure: Error | null = null;
  private finished = false;
  private detached = false;
  private wake: (() => void) | null = null;
  // Framing state carried across chunks: bytes left of the current message's body (and whether
  // it is CopyData), or the part of a 5-byte header seen so far.
  private left = 0;
  private keep = false;
  private readonly head = new Uint8Array(5);
  private headLen = 0;

  constructor(readonly text: string) {}

  submit(connection: Connection): void {
    const stream = connection.stream;
    const listeners = stream.listeners('data') as DataHandler[];
    if (listeners.length !== 1) throw new Error('COPY OUT: unexpected listeners on the connection');
    this.stream = stream;
    this.pgData = listeners[0]!;
    stream.removeListener('data', this.pgData);
    stream.pause();
    stream.on('readable', this.notify);
    connection.query(this.text);
  }

  handleError(err: Error): void {
    this.failure ??= err;
    // After a connection loss no ReadyForQuery comes: this error ends the query.
    if (!this.detached) this.detach(null);
    this.finished = true;
    this.notify();
  }

  handleCommandComplete(msg: { text?: string } | undefined): void {
    const m = /COPY (\d+)/.exec(msg?.text ?? '');
    if (m) this.rowCount = Number(m[1]);
  }

  handleReadyForQuery(): void {
    this.finished = true;
    this.notify();
  }

  // node-postgres calls these for other message kinds; none is expected during COPY OUT.
  handleRowDescription(): void {}
  handleDataRow(): void {}
  handleEmptyQuery(): void {}
  handlePortalSuspended(): void {}
  handleCopyInResponse(): void {}
  handleCopyData(): void {}

  private readonly notify = (): void => {
    const w = this.wake;
    this.wake = null;
    w?.();
  };

  /** Gives the socket back to node-postgres, first feeding it `rest` (bytes after COPY OUT). */
  private detach(rest: Buffer | null): void {
    if (this.detached) return;
    this.detached = true;
    // Failed before it was submitted (the connection died with this query still queued): the
    // socket was never taken.
    const stream = this.stream;
    if (stream === null) return;
    stream.removeListener('readable', this.notify);
    stream.on('data', this.pgData!);
    if (rest?.length) this.pgData!(rest);
    // Resumed on the next tick, once the handler above has run (as the data listener expects).
    process.nextTick(() => stream.resume());
  }

  /**
   * Squeezes the protocol headers out of one socket chunk, in place; returns the CopyData
   * payload it held (possibly empty). Detaches at CopyDone or at any other message.
   */
  private payload(chunk: Buffer): Buffer {
    const len = chunk.length;
    let p = 0;
    let w = 0;
    while (p < len) {
      if (this.left > 0) {
        const n = Math.min(this.left, len - p);
        if (this.keep) {
          if (w !== p) {
            if (n < 64) for (let i = 0; i < n; i++) chunk[w + i] = chunk[p + i]!;
            else chunk.copyWithin(w, p, p + n);
          }
          w += n;
        }
        p += n;
        this.left -= n;
        continue;
      }
      if (this.headLen === 0) {
        const code = chunk[p]!;
        if (
          code !== COPY_DATA &&
          code !== COPY_DONE &&
          code !== COPY_OUT_RESPONSE &&
          code !== NOTICE &&
          code !== PARAMETER_STATUS &&
          code !== NOTIFICATION
        ) {
          // An ErrorResponse (or anything unexpected): node-postgres parses it from here on.
          this.detach(chunk.subarray(p));
          return chunk.subarray(0, w);
        }
        if (p + 5 <= len) {
          const size =
            ((chunk[p + 1]! << 24) | (chunk[p + 2]! << 16) | (chunk[p + 3]! << 8) | chunk[p + 4]!) - 4;
          p += 5;
          if (code === COPY_DONE) {
            this.detach(chunk.subarray(p + size));
            return chunk.subarray(0, w);
          }
          this.left = size;
          this.keep = code === COPY_DATA;
          continue;
        }
      }
      // A header split across chunks.
      this.head[this.headLen++] = chunk[p++]!;
      if (this.headLen === 5) {
        const h = this.head;
        const size = ((h[1]! << 24) | (h[2]! << 16) | (h[3]! << 8) | h[4]!) - 4;
        this.headLen = 0;
        if (h[0] === COPY_DONE) {
          this.detach(chunk.subarray(p + size));
          return chunk.subarray(0, w);
        }
        this.left = size;
        this.keep = h[0] === COPY_DATA;
      }
    }
    return chunk.subarray(0, w);
  }

  private waitEvent(): Promise<void> {
    return new Promise((resolve) => {
      this.wake = resolve;
    });
  }

  /** The payload chunks, read as the consumer asks for them (the socket waits meanwhile). */
  async *chunks(): AsyncGenerator<Uint8Array> {
    while (!this.detached) {
      if (this.failure) throw this.failure;
      const chunk = this.stream?.read() as Buffer | null | undefined;
      if (chunk === null || chunk === undefined) {
        await this.waitEvent();
        continue;
      }
      const out = this.payload(chunk);
      if (out.length) yield out;
    }
    while (!this.finished) await this.waitEvent();
    if (this.failure) throw this.failure;
  }

  /** Reads to the end, discarding the data (a consumer stopped early on a connection kept open). */
  async drain(): Promise<void> {
    for await (const _ of this.chunks());
  }
}

/**
 * Runs `COPY ... TO STDOUT` on a checked-out client. Chunks are views of the socket's own
 * buffers, never reused, so a consumer may keep them. `finish()` after an early stop reads the
 * rest so the connection leaves COPY mode.
 */
export function copyOut(
  client: pg.ClientBase,
  sql: string,
): {
  chunks: AsyncGenerator<Uint8Array>;
  drain(): Promise<void>;
} {
  const q = new CopyOutQuery(sql);
  // node-postgres accepts any object with submit() as a query.
  void client.query(q as unknown as pg.QueryConfig);
  return { chunks: q.chunks(), drain: () => q.drain() };
}
