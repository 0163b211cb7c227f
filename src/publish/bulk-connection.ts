import { connect, type Socket } from 'node:net';
import { LarderError } from '../db/errors.js';
import { CacheUnavailableError, type PackedBatch } from './feature-cache.js';

/** Where a bulk connection goes (one Redis server; a Cluster uses the ioredis client instead). */
export interface BulkTarget {
  readonly host: string;
  readonly port: number;
  readonly username?: string | undefined;
  readonly password?: string | undefined;
  readonly db?: number | undefined;
}

interface Pending {
  /** Keys in the MGET, or -1 for a command answered by a status line (AUTH, SELECT). */
  readonly n: number;
  readonly bytes: number;
  readonly out: Uint8Array;
  readonly values: Float32Array;
  readonly found: Uint8Array;
  readonly what: string;
  readonly resolve: (b: PackedBatch) => void;
  readonly reject: (err: Error) => void;
  timer?: NodeJS.Timeout;
}

/** A batch of commands answered each by a status, integer or error line (SET, PERSIST, EXPIRE). */
interface WriteBatch {
  readonly replies: number;
  readonly what: string;
  got: number;
  /** Sum of the integer replies (PERSIST and EXPIRE answer 1 for each key they changed). */
  sum: number;
  /** The first error reply; the batch fails once every reply has come. */
  error: string | null;
  readonly resolve: (sum: number) => void;
  readonly reject: (err: Error) => void;
  timer?: NodeJS.Timeout;
}

const isBatch = (p: Pending | WriteBatch): p is WriteBatch => 'replies' in p;

/** RESP encoding of one command whose arguments are strings or bytes. */
function encode(args: ReadonlyArray<string | Uint8Array>, out: Array<string | Uint8Array>): void {
  let head = `*${args.length}\r\n`;
  for (const a of args) {
    if (typeof a === 'string') head += `$${Buffer.byteLength(a)}\r\n${a}\r\n`;
    else {
      out.push(`${head}$${a.byteLength}\r\n`, a);
      head = '\r\n';
    }
  }
  out.push(head);
}

const CR = 13;
const LF = 10;
const EMPTY = new Float32Array(0);
/** One read buffer per connection, reused for every read (no buffer allocated per socket read). */
const READ_BUFFER_BYTES = 1 << 20;

/**
 * One connection of its own for bulk reads of packed vectors (`readAll`): MGET replies are parsed
 * as they arrive, each value copied once from a reused read buffer into the batch's Float32Array.
 * The general client allocates a buffer per socket read and a Buffer object per value, which at
 * hundreds of megabytes a second is most of a bulk read's cost (and its garbage collections).
 * It speaks only the reply types MGET, AUTH, SELECT and the publisher's SET, PERSIST and EXPIRE
 * batches answer with (RESP2 arrays, bulk strings, status, integer and error lines); replies come
 * back in order, so several MGETs and write batches may be in flight.
 */
export class BulkConnection {
  private readonly socket: Socket;
  private readonly queue: Array<Pending | WriteBatch> = [];
  /** The write batch whose replies are arriving. */
  private batch: WriteBatch | null = null;
  private readonly timeoutMs: number;
  private closed: Error | null = null;
  // Parser state, kept across reads.
  private current: Pending | null = null;
  private item = 0;
  /** Bytes of the current value still to come, and where they go (-1: skipped). */
  private need = 0;
  private at = -1;
  /** Bytes of CRLF after a value still to skip. */
  private skip = 0;
  private line: number[] = [];

  private constructor(socket: Socket, timeoutMs: number) {
    this.socket = socket;
    this.timeoutMs = timeoutMs;
  }

  /** Connects, authenticates and selects the database; fails with CacheUnavailableError. */
  static async open(t: BulkTarget, timeoutMs: number, connectTimeoutMs: number): Promise<BulkConnection> {
    let conn: BulkConnection | undefined;
    const buffer = Buffer.allocUnsafe(READ_BUFFER_BYTES);
    const socket = connect({
      host: t.host,
      port: t.port,
      noDelay: true,
      onread: { buffer, callback: (n: number) => conn!.onRead(n, buffer) },
    });
    conn = new BulkConnection(socket, timeoutMs);
    const c = conn;
    await new Promise<void>((resolve, reject) => {
      const timer = setTimeout(() => {
        socket.destroy();
        reject(
          new CacheUnavailableError(`Redis ${t.host}:${t.port}: no connection in ${connectTimeoutMs} ms`),
        );
      }, connectTimeoutMs);
      socket.once('connect', () => {
        clearTimeout(timer);
        resolve();
      });
      socket.once('error', (err) => {
        clearTimeout(timer);
        reject(new CacheUnavailableError(`Redis ${t.host}:${t.port}: ${err.message}`, { cause: err }));
      });
    });
    socket.on('error', (err) => c.fail(new CacheUnavailableError(`Redis bulk read: ${err.message}`)));
    socket.on('close', () => c.fail(new CacheUnavailableError('Redis bulk read: connection closed')));
    try {
      if (t.password !== undefined) {
        await c.status(t.username ? ['AUTH', t.username, t.password] : ['AUTH', t.password], 'AUTH');
      }
      if (t.db) await c.status(['SELECT', String(t.db)], 'SELECT');
    } catch (err) {
      c.close();
      throw err;
    }
    return c;
  }

  /** True until the connection failed or was closed (then open a new one). */
  usable(): boolean {
    return this.closed === null;
  }

  /**
   * MGET of `keys`, every value expected to be `floats` Float32 values: copied into one array;
   * an absent key or a value of another size is counted in `missing` and left NaN.
   */
  mget(keys: readonly string[], floats: number): Promise<PackedBatch> {
    const bytes = floats * 4;
    // Uninitialised memory: every cell is written, by a value or by the NaN fill of a miss.
    const raw = Buffer.allocUnsafeSlow(keys.length * bytes);
    const values = new Float32Array(raw.buffer, raw.byteOffset, keys.length * floats);
    let cmd = `*${keys.length + 1}\r\n$4\r\nMGET\r\n`;
    for (const k of keys) cmd += `$${Buffer.byteLength(k)}\r\n${k}\r\n`;
    return this.send(cmd, {
      n: keys.length,
      bytes,
      out: new Uint8Array(raw.buffer, raw.byteOffset, raw.byteLength),
      values,
      found: new Uint8Array(keys.length),
      what: 'MGET',
    });
  }

  /**
   * SET of every entry (with PX `ttlMs` when given), written in one go without a client's per-command
   * objects (a version's 141 MB took 0.15 s this way, 0.45 s through the general client's
   * pipelines); resolves once every SET is answered, and fails with the first error reply.
   */
  setMany(entries: ReadonlyArray<readonly [string, Uint8Array | string]>, ttlMs?: number): Promise<number> {
    const out: Array<string | Uint8Array> = [];
    const ttl = ttlMs ? ['PX', String(ttlMs)] : [];
    for (const [k, v] of entries) encode(['SET', k, typeof v === 'string' ? Buffer.from(v) : v, ...ttl], out);
    return this.write(out, entries.length, 'SET');
  }

  /** PERSIST or EXPIRE (with `args`) of every key; resolves with how many keys it changed. */
  eachKey(
    command: 'PERSIST' | 'EXPIRE',
    keys: readonly string[],
    args: readonly string[] = [],
  ): Promise<number> {
    const out: Array<string | Uint8Array> = [];
    for (const k of keys) encode([command, k, ...args], out);
    return this.write(out, keys.length, command);
  }

  close(): void {
    this.fail(new CacheUnavailableError('Redis bulk read: connection closed'));
    this.socket.destroy();
  }

  private status(args: string[], what: string): Promise<PackedBatch> {
    const cmd = `*${args.length}\r\n${args.map((a) => `$${Buffer.byteLength(a)}\r\n${a}\r\n`).join('')}`;
    return this.send(cmd, {
      n: -1,
      bytes: 0,
      out: new Uint8Array(0),
      values: EMPTY,
      found: new Uint8Array(0),
      what,
    });
  }

  private send(cmd: string, p: Omit<Pending, 'resolve' | 'reject'>): Promise<PackedBatch> {
    if (this.closed) return Promise.reject(this.closed);
    return new Promise<PackedBatch>((resolve, reject) => {
      const pending: Pending = { ...p, resolve, reject };
      pending.timer = this.deadline(p.what);
      this.queue.push(pending);
      this.socket.write(cmd);
    });
  }

  /** Replies are matched by order: after a timeout the stream cannot be trusted, so it is closed. */
  private deadline(what: string): NodeJS.Timeout {
    return setTimeout(() => {
      this.fail(new CacheUnavailableError(`Redis did not answer ${what} in ${this.timeoutMs} ms`));
      this.socket.destroy();
    }, this.timeoutMs);
  }

  private write(out: ReadonlyArray<string | Uint8Array>, replies: number, what: string): Promise<number> {
    if (this.closed) return Promise.reject(this.closed);
    if (replies === 0) return Promise.resolve(0);
    return new Promise<number>((resolve, reject) => {
      const b: WriteBatch = { replies, what, got: 0, sum: 0, error: null, resolve, reject };
      b.timer = this.deadline(what);
      this.queue.push(b);
      this.socket.cork();
      for (const chunk of out) this.socket.write(chunk);
      this.socket.uncork();
    });
  }

  /** One reply line of the current write batch. */
  private batchReply(b: WriteBatch, text: string): void {
    const type = text.charCodeAt(0);
    if (type === 58 /* : */) b.sum += Number(text.slice(1));
    else if (type === 45 /* - */) b.error ??= text.slice(1);
    else if (type !== 43 /* + */) {
      this.protocol(text);
      return;
    }
    if (++b.got < b.replies) return;
    clearTimeout(b.timer);
    this.batch = null;
    if (b.error !== null) b.reject(new LarderError('CACHE_ERROR', `Redis refused ${b.what}: ${b.error}`));
    else b.resolve(b.sum);
  }

  private fail(err: Error): void {
    if (this.closed) return;
    this.closed = err;
    const all: Array<Pending | WriteBatch> = [
      ...(this.current ? [this.current] : []),
      ...(this.batch ? [this.batch] : []),
      ...this.queue,
    ];
    this.current = null;
    this.batch = null;
    this.queue.length = 0;
    for (const p of all) {
      clearTimeout(p.timer);
      p.reject(err);
    }
  }

  private finish(p: Pending): void {
    clearTimeout(p.timer);
    this.current = null;
    let missing = 0;
    for (let i = 0; i < p.n; i++) {
      if (p.found[i]) continue;
      missing++;
      p.values.fill(Number.NaN, (i * p.bytes) / 4, ((i + 1) * p.bytes) / 4);
    }
    p.resolve({ values: p.values, found: p.found, missing });
  }

  /** The next value of the current MGET array starts (or is absent, for length -1). */
  private nextValue(length: number): void {
    const p = this.current!;
    if (length >= 0) {
      const wanted = length === p.bytes;
      if (wanted) p.found[this.item] = 1;
      if (length > 0) {
        this.need = length;
        this.at = wanted ? this.item * p.bytes : -1;
        return;
      }
      this.skip = 2;
    }
    this.item++;
    if (this.item === p.n) this.finish(p);
  }

  private onLine(text: string): void {
    const type = text.charCodeAt(0);
    if (this.batch) {
      this.batchReply(this.batch, text);
      return;
    }
    if (this.current) {
      if (type === 36 /* $ */) this.nextValue(Number(text.slice(1)));
      else this.protocol(text);
      return;
    }
    const p = this.queue.shift();
    if (!p) {
      this.protocol(text);
      return;
    }
    if (isBatch(p)) {
      this.batch = p;
      this.batchReply(p, text);
      return;
    }
    if (type === 45 /* - */) {
      clearTimeout(p.timer);
      p.reject(new LarderError('CACHE_ERROR', `Redis refused ${p.what}: ${text.slice(1)}`));
    } else if (type === 43 /* + */ && p.n === -1) {
      clearTimeout(p.timer);
      p.resolve({ values: EMPTY, found: p.found, missing: 0 });
    } else if (type === 42 /* * */ && Number(text.slice(1)) === p.n) {
      this.current = p;
      this.item = 0;
      if (p.n === 0) this.finish(p);
    } else {
      this.queue.unshift(p);
      this.protocol(text);
    }
  }

  private protocol(text: string): void {
    this.fail(new CacheUnavailableError(`Redis bulk read: unexpected reply '${text.slice(0, 40)}'`));
    this.socket.destroy();
  }

  /** Consumes one read; `buf` is the connection's read buffer, overwritten by the next read. */
  private onRead(n: number, buf: Buffer): boolean {
    let i = 0;
    while (i < n && !this.closed) {
      if (this.need > 0) {
        const k = Math.min(this.need, n - i);
        if (this.at >= 0) {
          this.current!.out.set(buf.subarray(i, i + k), this.at);
          this.at += k;
        }
        this.need -= k;
        i += k;
        if (this.need === 0) {
          this.skip = 2;
          this.item++;
          if (this.item === this.current!.n) this.finish(this.current!);
        }
        continue;
      }
      if (this.skip > 0) {
        const k = Math.min(this.skip, n - i);
        this.skip -= k;
        i += k;
        continue;
      }
      // A header line: `*N`, `$L`, `+OK`, `-ERR ...`, up to CRLF (possibly split across reads).
      let end = i;
      while (end < n && buf[end] !== LF) end++;
      if (end === n) {
        for (let j = i; j < n; j++) this.line.push(buf[j]!);
        break;
      }
      let text: string;
      if (this.line.length) {
        for (let j = i; j < end; j++) this.line.push(buf[j]!);
        text = String.fromCharCode(...this.line);
        this.line = [];
      } else {
        text = buf.toString('latin1', i, end);
      }
      i = end + 1;
      this.onLine(text.charCodeAt(text.length - 1) === CR ? text.slice(0, -1) : text);
    }
    return true;
  }
}
