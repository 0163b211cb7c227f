import type { Config } from '../config/config.js';
import { readEnv } from '../config/env.js';
import type { Db } from '../db/database.js';
import { openJobDatabase, processHolder, withApplicationName } from './job-database.js';
import { createReporter, type Reporter } from './progress.js';
import type { RunHolder } from './run-store.js';
import { Waker, WorkNotifier } from './work-notifier.js';

/** The connections and identity of one runner, worker or scheduler process. */
export interface JobProcess {
  readonly db: Db;
  /** One connection reserved for the run locks (the same handle in embedded mode). */
  readonly lockDb: Db;
  readonly holder: RunHolder;
  readonly reporter: Reporter;
  readonly waker: Waker;
  close(): Promise<void>;
}

/**
 * Pool size for `concurrency` claim loops: each item holds its lock session plus the sessions the
 * build uses for one partition (a read and a write stream), and the runner polls and records.
 */
export function poolSizeFor(config: Config, concurrency: number): number {
  return Math.max(config.database.poolSize, 3 * concurrency + 3);
}

export async function openJobProcess(config: Config, role: string, concurrency: number): Promise<JobProcess> {
  const holder = processHolder(role);
  const env = readEnv();
  const reporter = createReporter({
    tty: process.stderr.isTTY === true,
    stream: process.stderr,
    ...(env.LARDER_LOG_LEVEL ? { level: env.LARDER_LOG_LEVEL } : {}),
    base: { pid: holder.pid, host: holder.host, role },
  });
  const db = await openJobDatabase(config, holder.app, { poolSize: poolSizeFor(config, concurrency) });
  let lockDb = db;
  let notifier: WorkNotifier | undefined;
  const waker = new Waker();
  try {
    if (db.kind === 'server' && config.database.url) {
      lockDb = await openJobDatabase(config, holder.app, { poolSize: 1, migrate: false });
      notifier = new WorkNotifier(
        withApplicationName(config.database.url, holder.app),
        db.schema,
        waker,
        (err) => reporter.warn(`work notifications paused (polling goes on): ${err.message}`),
      );
      await notifier.start();
    }
  } catch (err) {
    await db.close();
    throw err;
  }
  return {
    db,
    lockDb,
    holder,
    reporter,
    waker,
    async close() {
      await notifier?.close();
      if (lockDb !== db) await lockDb.close();
      await db.close();
    },
  };
}

/**
 * SIGTERM and SIGINT stop the process gracefully: the signal's controller aborts, the current
 * step (or item) finishes. A second SIGINT exits at once.
 */
export function stopOnSignals(reporter: Reporter, what: string): { signal: AbortSignal; dispose(): void } {
  const ac = new AbortController();
  let interrupts = 0;
  const onTerm = (sig: NodeJS.Signals) => {
    if (sig === 'SIGINT' && ++interrupts > 1) process.exit(130);
    if (!ac.signal.aborted) reporter.warn(`${sig}: ${what}`);
    ac.abort();
  };
  process.on('SIGTERM', onTerm);
  process.on('SIGINT', onTerm);
  return {
    signal: ac.signal,
    dispose() {
      process.off('SIGTERM', onTerm);
      process.off('SIGINT', onTerm);
    },
  };
}
