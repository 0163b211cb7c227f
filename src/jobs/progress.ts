import pino from 'pino';

/** Where a long step stands. */
export interface ProgressState {
  readonly label: string;
  readonly done: number;
  readonly total: number;
  readonly rows: number;
  /** ms since epoch when the step started. */
  readonly startedAt: number;
}

type Fields = Readonly<Record<string, unknown>>;

/**
 * How a run talks while it works: a progress bar on a terminal, one JSON object per line (pino)
 * otherwise, so a scheduler's log collector gets machine-readable events.
 */
export interface Reporter {
  info(msg: string, fields?: Fields): void;
  warn(msg: string, fields?: Fields): void;
  error(msg: string, fields?: Fields): void;
  progress(state: ProgressState): void;
  /** Ends the current progress bar (prints its last state on a terminal). */
  endProgress(): void;
}

const SI = ['', 'k', 'M', 'G', 'T'];

/** 1234567 -> "1.23M"; counts under 1000 are printed whole. */
export function compactNumber(n: number): string {
  if (!Number.isFinite(n)) return '?';
  let i = 0;
  let v = Math.abs(n);
  while (v >= 1000 && i < SI.length - 1) {
    v /= 1000;
    i++;
  }
  const s = i === 0 ? String(Math.round(v)) : v.toPrecision(3).replace(/\.?0+$/, '');
  return `${n < 0 ? '-' : ''}${s}${SI[i]}`;
}

/** Seconds as m:ss or h:mm:ss. */
export function clock(seconds: number): string {
  if (!Number.isFinite(seconds) || seconds < 0) return '--:--';
  const s = Math.round(seconds);
  const h = Math.floor(s / 3600);
  const m = Math.floor((s % 3600) / 60);
  const ss = String(s % 60).padStart(2, '0');
  return h > 0 ? `${h}:${String(m).padStart(2, '0')}:${ss}` : `${m}:${ss}`;
}

/** Rate of rows per second and the time left, estimated from the partitions finished so far. */
export function progressFigures(p: ProgressState, now: number): { rate: number; etaSeconds: number } {
  const elapsed = Math.max(1e-3, (now - p.startedAt) / 1000);
  const rate = p.rows / elapsed;
  const etaSeconds = p.done > 0 && p.total >= p.done ? (elapsed / p.done) * (p.total - p.done) : Number.NaN;
  return { rate, etaSeconds };
}

/** One line of progress bar: label, bar, partitions, rows, rate and ETA, fitted to `width`. */
export function progressLine(p: ProgressState, now: number, width = 100): string {
  const { rate, etaSeconds } = progressFigures(p, now);
  const tail =
    ` ${p.done}/${p.total} partitions  ${compactNumber(p.rows)} rows  ${compactNumber(rate)} rows/s` +
    `  ETA ${p.done >= p.total ? '0:00' : clock(etaSeconds)}`;
  const label = p.label.length > 24 ? `${p.label.slice(0, 23)}…` : p.label;
  const barWidth = Math.max(10, Math.min(40, width - label.length - tail.length - 4));
  const filled = p.total > 0 ? Math.round((barWidth * Math.min(p.done, p.total)) / p.total) : 0;
  return `${label} [${'█'.repeat(filled)}${'░'.repeat(barWidth - filled)}]${tail}`;
}

export interface ReporterOptions {
  /** Draw a bar (a terminal) or write JSON lines (anything else). */
  readonly tty: boolean;
  readonly stream: NodeJS.WritableStream & { columns?: number };
  readonly level?: string;
  /** Fields on every JSON line (e.g. the run id). */
  readonly base?: Fields;
  /** Minimum gap between two JSON progress lines, ms. */
  readonly progressEveryMs?: number;
}

export function createReporter(opts: ReporterOptions): Reporter {
  return opts.tty ? new TerminalReporter(opts.stream) : new JsonReporter(opts);
}

class TerminalReporter implements Reporter {
  #bar: ProgressState | undefined;
  #drawn = false;
  constructor(private readonly out: NodeJS.WritableStream & { columns?: number }) {}

  #clear() {
    if (this.#drawn) this.out.write('\r\x1b[2K');
    this.#drawn = false;
  }
  // Fields are for log collectors; a person reads the message.
  #line(prefix: string, msg: string) {
    this.#clear();
    this.out.write(`${prefix}${msg}\n`);
    if (this.#bar) this.progress(this.#bar);
  }
  info(msg: string) {
    this.#line('', msg);
  }
  warn(msg: string) {
    this.#line('warning: ', msg);
  }
  error(msg: string) {
    this.#line('error: ', msg);
  }
  progress(state: ProgressState) {
    this.#bar = state;
    this.out.write(`\r\x1b[2K${progressLine(state, Date.now(), this.out.columns ?? 100)}`);
    this.#drawn = true;
  }
  endProgress() {
    // The bar's last state stays on screen as a line of its own.
    if (this.#bar)
      this.out.write(`\r\x1b[2K${progressLine(this.#bar, Date.now(), this.out.columns ?? 100)}\n`);
    this.#bar = undefined;
    this.#drawn = false;
  }
}

class JsonReporter implements Reporter {
  readonly #log: pino.Logger;
  #lastProgress = 0;
  readonly #every: number;
  constructor(opts: ReporterOptions) {
    this.#log = pino(
      {
        level: opts.level ?? 'info',
        base: { ...(opts.base ?? {}) },
        timestamp: pino.stdTimeFunctions.isoTime,
      },
      opts.stream,
    );
    this.#every = opts.progressEveryMs ?? 1000;
  }
  info(msg: string, fields?: Fields) {
    this.#log.info(fields ?? {}, msg);
  }
  warn(msg: string, fields?: Fields) {
    this.#log.warn(fields ?? {}, msg);
  }
  error(msg: string, fields?: Fields) {
    this.#log.error(fields ?? {}, msg);
  }
  progress(state: ProgressState) {
    const now = Date.now();
    if (now - this.#lastProgress < this.#every && state.done < state.total) return;
    this.#lastProgress = now;
    const { rate, etaSeconds } = progressFigures(state, now);
    this.#log.info(
      {
        step: state.label,
        partitionsDone: state.done,
        partitions: state.total,
        rows: state.rows,
        rowsPerSecond: Math.round(rate),
        etaSeconds: Number.isFinite(etaSeconds) ? Math.round(etaSeconds) : null,
      },
      'progress',
    );
  }
  endProgress() {
    this.#lastProgress = 0;
  }
}

/**
 * Plain lines through `write` (the demo, embedding programs): events as text, progress only
 * when a step's partitions are all done.
 */
export function lineReporter(write: (line: string) => void, indent = '  '): Reporter {
  const line = (prefix: string) => (msg: string) => write(`${indent}${prefix}${msg}`);
  return {
    info: line(''),
    warn: line(''),
    error: line('error: '),
    progress(p) {
      if (p.total > 0 && p.done === p.total) {
        const { rate } = progressFigures(p, Date.now());
        write(
          `${indent}${p.label}: ${p.done}/${p.total} partitions, ${compactNumber(p.rows)} rows, ${compactNumber(rate)} rows/s`,
        );
      }
    },
    endProgress() {},
  };
}
