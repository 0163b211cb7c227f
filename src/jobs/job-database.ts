import { hostname } from 'node:os';
import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import { openDatabase } from '../db/open.js';
import type { RunHolder } from './run-store.js';

/** The process's identity as other processes see it: runs table, pg_stat_activity, claims. */
export function processHolder(role: string): RunHolder {
  const host = hostname();
  const pid = process.pid;
  // application_name holds at most 63 bytes; the host is cut rather than the pid.
  const app = `larder ${role} ${pid}@${host}`.slice(0, 63);
  return { pid, host, app };
}

/**
 * A connection string carrying `application_name`, so an operator (and `--no-wait`'s message)
 * can tell the runner's and workers' backends apart in pg_stat_activity. A parameter in the URL
 * wins over node-postgres' own option, which the shared pool sets to plain `larder`.
 */
export function withApplicationName(url: string, app: string): string {
  try {
    const u = new URL(url);
    if (u.protocol !== 'postgres:' && u.protocol !== 'postgresql:') return url;
    u.searchParams.set('application_name', app);
    return u.toString();
  } catch {
    return url;
  }
}

/** Opens the configured database for a job process, its backends named after the process. */
export async function openJobDatabase(
  config: Config,
  app: string,
  opts: { poolSize?: number; migrate?: boolean } = {},
): Promise<Db> {
  const url = config.database.url;
  const named: Config = url
    ? { ...config, database: { ...config.database, url: withApplicationName(url, app) } }
    : config;
  return openDatabase(named, {
    ...(opts.poolSize === undefined ? {} : { poolSize: opts.poolSize }),
    ...(opts.migrate === undefined ? {} : { migrate: opts.migrate }),
  });
}
