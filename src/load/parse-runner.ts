/**
 * Runs the first pass over a file either inline or in a worker thread, and hands its output to
 * the caller as COPY segments. With a worker, parsing (one core) overlaps with the database
 * ingesting the previous chunks (the other core); chunks in flight are bounded by credits, so
 * memory stays constant whatever the file size.
 */
import { Worker } from 'node:worker_threads';
import { InputError } from '../db/errors.js';
import { READ_CHUNK } from './csv-records.js';
import { type ParseJob, type ParseResult, parseFile } from './parse-file.js';

/** Chunks (256 KB each) buffered between the parser and the COPY. */
export const CHUNKS_IN_FLIGHT = 8;

/**
 * How far the parser may run ahead: a few chunks for a streaming COPY; a whole COPY segment more
 * when the database takes a segment at once (embedded), so parsing the next one overlaps with it.
 */
export function chunksInFlight(job: Pick<ParseJob, 'segmentBytes'>): number {
  if (!Number.isFinite(job.segmentBytes)) return CHUNKS_IN_FLIGHT;
  return CHUNKS_IN_FLIGHT + Math.min(256, Math.ceil(job.segmentBytes / READ_CHUNK));
}

export interface ParseRun {
  /** COPY segments in order; each yields the chunks of one complete binary COPY stream. */
  readonly segments: AsyncIterable<AsyncIterable<Uint8Array>>;
  /** The pass's summary; rejects with the pass's error (an InputError for bad files). */
  readonly result: Promise<ParseResult>;
  /** Stops the pass early (the database side failed). */
  stop(): Promise<void>;
}

type Item =
  | { kind: 'chunk'; bytes: Uint8Array }
  | { kind: 'segment' }
  | { kind: 'end' }
  | { kind: 'error'; err: unknown };

class ItemQueue {
  private readonly items: Item[] = [];
  private wake: (() => void) | null = null;
  private room: Array<() => void> = [];
  chunks = 0;

  constructor(private readonly onTake: () => void) {}

  push(item: Item): void {
    this.items.push(item);
    if (item.kind === 'chunk') this.chunks++;
    this.wake?.();
    this.wake = null;
  }

  /** Resolves once fewer than `limit` chunks wait. */
  async roomFor(limit: number): Promise<void> {
    while (this.chunks >= limit) await new Promise<void>((r) => this.room.push(r));
  }

  async peek(): Promise<Item> {
    while (this.items.length === 0) await new Promise<void>((r) => (this.wake = r));
    return this.items[0]!;
  }

  /** Lets a producer waiting for room go on (it then sees that the run was stopped). */
  release(): void {
    this.chunks = 0;
    for (const r of this.room.splice(0)) r();
  }

  take(): Item {
    const item = this.items.shift()!;
    if (item.kind === 'chunk') {
      this.chunks--;
      this.onTake();
      for (const r of this.room.splice(0)) r();
    }
    return item;
  }
}

function segmentsOf(queue: ItemQueue): AsyncIterable<AsyncIterable<Uint8Array>> {
  async function* segment(): AsyncGenerator<Uint8Array> {
    for (;;) {
      const item = await queue.peek();
      if (item.kind === 'error') throw item.err;
      if (item.kind === 'end') return;
      queue.take();
      if (item.kind === 'segment') return;
      yield item.bytes;
    }
  }
  return (async function* () {
    for (;;) {
      const item = await queue.peek();
      if (item.kind === 'error') throw item.err;
      if (item.kind === 'end') return;
      yield segment();
    }
  })();
}

class Stopped extends Error {}

function runInline(job: ParseJob): ParseRun {
  let stopped = false;
  const limit = chunksInFlight(job);
  const queue = new ItemQueue(() => {});
  const result = parseFile(job, {
    async chunk(bytes) {
      if (stopped) throw new Stopped('stopped');
      queue.push({ kind: 'chunk', bytes });
      await queue.roomFor(limit);
    },
    segmentEnd() {
      queue.push({ kind: 'segment' });
    },
  });
  result.then(
    () => queue.push({ kind: 'end' }),
    (err) => queue.push({ kind: 'error', err }),
  );
  return {
    segments: segmentsOf(queue),
    result,
    async stop() {
      stopped = true;
      queue.release();
      await result.catch(() => {});
    },
  };
}

/** Messages from the worker (see parse-worker.ts). */
export type WorkerMessage =
  | { kind: 'chunk'; bytes: Uint8Array }
  | { kind: 'segment' }
  | { kind: 'done'; result: ParseResult }
  | { kind: 'error'; name: string; message: string; stack?: string };

function runInWorker(job: ParseJob): ParseRun {
  const worker = new Worker(new URL('./parse-worker-boot.mjs', import.meta.url), {
    workerData: { entry: new URL('./parse-worker.ts', import.meta.url).href, job },
  });
  const queue = new ItemQueue(() => worker.postMessage('ack'));
  let settled = false;
  const result = new Promise<ParseResult>((resolve, reject) => {
    const fail = (err: unknown) => {
      if (settled) return;
      settled = true;
      queue.push({ kind: 'error', err });
      reject(err);
    };
    worker.on('message', (m: WorkerMessage) => {
      if (m.kind === 'chunk') queue.push({ kind: 'chunk', bytes: m.bytes });
      else if (m.kind === 'segment') queue.push({ kind: 'segment' });
      else if (m.kind === 'done') {
        settled = true;
        queue.push({ kind: 'end' });
        resolve(m.result);
      } else {
        const err = m.name === 'InputError' ? new InputError(m.message) : new Error(m.message);
        if (m.stack && !(err instanceof InputError)) err.stack = m.stack;
        fail(err);
      }
    });
    worker.on('error', fail);
    worker.on('exit', (code) => fail(new Error(`the parse worker exited (code ${code}) before finishing`)));
  });
  result.catch(() => {});
  result.finally(() => worker.terminate()).catch(() => {});
  return {
    segments: segmentsOf(queue),
    result,
    async stop() {
      settled = true;
      await worker.terminate();
    },
  };
}

/** Starts the first pass over `job.file`, in a worker thread when `inWorker`. */
export function startParse(job: ParseJob, inWorker: boolean): ParseRun {
  return inWorker ? runInWorker(job) : runInline(job);
}
