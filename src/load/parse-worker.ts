/**
 * Worker-thread side of the first pass (see parse-runner.ts): parses the file, transfers COPY
 * chunks to the main thread and waits for a credit ('ack') whenever `chunksInFlight` are unread.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { type ParseJob, parseFile } from './parse-file.js';
import { chunksInFlight, type WorkerMessage } from './parse-runner.js';

const port = parentPort!;
const job = (workerData as { job: ParseJob }).job;
let credits = chunksInFlight(job);
let waiting: (() => void) | null = null;
port.on('message', (m) => {
  if (m !== 'ack') return;
  credits++;
  waiting?.();
  waiting = null;
});
const post = (m: WorkerMessage, transfer: ArrayBuffer[] = []) => port.postMessage(m, transfer);

parseFile(job, {
  async chunk(bytes) {
    while (credits <= 0) await new Promise<void>((r) => (waiting = r));
    credits--;
    // Transfer, not copy: the chunk must own its whole buffer.
    const own =
      bytes.byteOffset === 0 && bytes.byteLength === bytes.buffer.byteLength
        ? bytes
        : Uint8Array.prototype.slice.call(bytes);
    post({ kind: 'chunk', bytes: own }, [own.buffer as ArrayBuffer]);
  },
  segmentEnd() {
    post({ kind: 'segment' });
  },
}).then(
  (result) => {
    post({ kind: 'done', result }); // the main thread ends the worker once it has this
  },
  (err: unknown) => {
    const e = err instanceof Error ? err : new Error(String(err));
    post({ kind: 'error', name: e.name, message: e.message, ...(e.stack ? { stack: e.stack } : {}) });
  },
);
