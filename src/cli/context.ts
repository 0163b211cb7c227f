import type { Command } from 'commander';
import { type Config, loadConfig } from '../config/config.js';
import type { Db } from '../db/database.js';
import { openDatabase } from '../db/open.js';

/** What every command gets: the global options, lazily loaded config and database, output. */
export interface CliContext {
  config(): Promise<Config>;
  /** Opens the configured database with migrations applied; closed when the command ends. */
  db(opts?: { poolSize?: number }): Promise<Db>;
  out(line: string): void;
  err(line: string): void;
  /** Set by a command to report failure without throwing (e.g. 1 when a check blocks). */
  exitCode: number;
  /** Work to do when the command ends (close pools, flush logs). */
  onClose(fn: () => Promise<void> | void): void;
}

export interface CommandModule {
  register(program: Command, ctx: CliContext): void;
}

export function createContext(program: Command): CliContext & { close(): Promise<void> } {
  let config: Promise<Config> | undefined;
  let db: Promise<Db> | undefined;
  const closers: Array<() => Promise<void> | void> = [];
  const ctx = {
    exitCode: 0,
    config() {
      config ??= loadConfig({ path: program.opts<{ config?: string }>().config });
      return config;
    },
    db(opts: { poolSize?: number } = {}) {
      db ??= ctx.config().then((c) => openDatabase(c, opts.poolSize ? { poolSize: opts.poolSize } : {}));
      return db;
    },
    out: (line: string) => void process.stdout.write(`${line}\n`),
    err: (line: string) => void process.stderr.write(`${line}\n`),
    onClose(fn: () => Promise<void> | void) {
      closers.push(fn);
    },
    async close() {
      for (const fn of closers.reverse()) await fn();
      if (db) await (await db.catch(() => undefined))?.close();
    },
  };
  return ctx;
}
