/**
 * One streaming pass over a table shared by every check that reads it: checks subscribe a
 * visitor, and the pass starts once every check that declared it has either subscribed or
 * finished without subscribing. Reading 57M sales rows once instead of once per check is what
 * keeps a full check run near the cost of a single ordered COPY.
 */
export class SharedPass<V, R> {
  private readonly subscribers: Array<{ visitor: V | undefined; settle: Settle<R> }> = [];
  private pending: number;
  private started = false;
  private readonly run: (visitors: ReadonlyArray<Guarded<V>>) => Promise<R>;
  private finished!: () => void;
  /** Settles (never rejects) once the pass is over, or known not to be needed. */
  readonly settled: Promise<void>;

  /**
   * @param expected how many checks declared this pass
   * @param run reads the table, calling each guarded visitor; returns the pass's own summary
   */
  constructor(expected: number, run: (visitors: ReadonlyArray<Guarded<V>>) => Promise<R>) {
    this.pending = expected;
    this.run = run;
    this.settled = new Promise((res) => {
      this.finished = res;
    });
    if (expected === 0) this.finished();
  }

  /** Joins the pass (optionally with a visitor); resolves with the pass summary when it ends. */
  subscribe(visitor?: V): Promise<R> {
    if (this.started) return Promise.reject(new Error('subscribed after the shared pass started'));
    return new Promise<R>((resolve, reject) => {
      this.subscribers.push({ visitor, settle: { resolve, reject } });
      this.pending--;
      this.maybeStart();
    });
  }

  /** A declared reader that finished (or failed) without subscribing. */
  release(): void {
    if (this.started) return;
    this.pending--;
    this.maybeStart();
  }

  private maybeStart(): void {
    if (this.started || this.pending > 0) return;
    this.started = true;
    void this.execute().finally(() => this.finished());
  }

  private async execute(): Promise<void> {
    if (this.subscribers.length === 0) return;
    const guarded = this.subscribers.map((s) => new Guarded(s.visitor, s.settle));
    try {
      const result = await this.run(guarded.filter((g) => g.visitor !== undefined));
      for (const g of guarded) g.finish(result);
    } catch (err) {
      for (const g of guarded) g.fail(err);
    }
  }
}

interface Settle<R> {
  resolve(r: R): void;
  reject(e: unknown): void;
}

/**
 * A visitor whose failure removes only itself from the pass: `call` swallows its error and
 * its subscriber's promise rejects with it when the pass ends.
 */
export class Guarded<V> {
  private error: unknown;
  private failed = false;
  readonly visitor: V | undefined;
  private readonly settle: Settle<never> | Settle<unknown>;

  constructor(visitor: V | undefined, settle: Settle<never> | Settle<unknown>) {
    this.visitor = visitor;
    this.settle = settle;
  }

  get active(): boolean {
    return !this.failed && this.visitor !== undefined;
  }

  call(fn: (v: V) => void): void {
    if (!this.active) return;
    try {
      fn(this.visitor as V);
    } catch (err) {
      this.failed = true;
      this.error = err;
    }
  }

  finish(result: unknown): void {
    if (this.failed) this.settle.reject(this.error);
    else (this.settle as Settle<unknown>).resolve(result);
  }

  fail(err: unknown): void {
    this.settle.reject(this.failed ? this.error : err);
  }
}
