import pg from 'pg';
import { WORK_CHANNEL } from './work-queue.js';

/** Sleeps that end early on `wake()` or an abort: idle workers poll, and NOTIFY cuts the wait. */
export class Waker {
  #waiters = new Set<() => void>();

  wake(): void {
    const ws = [...this.#waiters];
    this.#waiters.clear();
    for (const w of ws) w();
  }

  /** Resolves after `ms`, on `wake()`, or when `signal` aborts, whichever comes first. */
  wait(ms: number, signal?: AbortSignal): Promise<void> {
    if (signal?.aborted) return Promise.resolve();
    return new Promise((resolve) => {
      const done = () => {
        clearTimeout(timer);
        signal?.removeEventListener('abort', done);
        this.#waiters.delete(done);
        resolve();
      };
      const timer = setTimeout(done, ms);
      signal?.addEventListener('abort', done, { once: true });
      this.#waiters.add(done);
    });
  }
}

/**
 * LISTENs on the work channels on a connection of its own and wakes the waker on every
 * notification for this schema (new items) or for any job (an item finished). Only ever an
 * optimisation: when the connection fails it reconnects in the background and polling carries on.
 */
export class WorkNotifier {
  #client: pg.Client | undefined;
  #closed = false;
  #retry: NodeJS.Timeout | undefined;

  constructor(
    private readonly url: string,
    private readonly schema: string,
    private readonly waker: Waker,
    private readonly onError: (err: Error) => void = () => {},
  ) {}

  async start(): Promise<void> {
    if (this.#closed) return;
    const client = new pg.Client({ connectionString: this.url });
    client.on('error', (err) => this.#lost(client, err));
    client.on('notification', (msg) => {
      if (msg.channel === WORK_CHANNEL && msg.payload !== this.schema) return;
      this.waker.wake();
    });
    try {
      await client.connect();
      await client.query(`LISTEN ${WORK_CHANNEL}; LISTEN ${WORK_CHANNEL}_job`);
      this.#client = client;
      // A notification may have been missed while disconnected.
      this.waker.wake();
    } catch (err) {
      this.#lost(client, err as Error);
    }
  }

  #lost(client: pg.Client, err: Error): void {
    if (this.#client === client) this.#client = undefined;
    client.end().catch(() => {});
    if (this.#closed) return;
    this.onError(err);
    clearTimeout(this.#retry);
    this.#retry = setTimeout(() => void this.start(), 5000);
    this.#retry.unref();
  }

  async close(): Promise<void> {
    this.#closed = true;
    clearTimeout(this.#retry);
    const c = this.#client;
    this.#client = undefined;
    await c?.end().catch(() => {});
  }
}
