import { type ChildProcess, spawn } from 'node:child_process';
import { SMALL_SET } from './chain-fixture.js';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';

export const ROOT = resolve(import.meta.dirname, '../../..');

export interface Child {
  readonly proc: ChildProcess;
  /** Everything printed so far on stdout and stderr. */
  readonly output: () => string;
  readonly done: Promise<{ code: number | null; signal: NodeJS.Signals | null; output: string }>;
}

/** Writes a config file into a fresh temp dir and returns its path. */
export function writeConfig(config: unknown): string {
  const dir = mkdtempSync(join(tmpdir(), 'larder-jobs-'));
  const path = join(dir, 'larder.config.json');
  writeFileSync(path, JSON.stringify(config, null, 2));
  return path;
}

export interface ChildEnv {
  readonly databaseUrl: string;
  readonly schema: string;
  readonly configPath: string;
  readonly redisUrl?: string;
}

/** Starts `node <script> ...args` (tsx loaded) with the test's server, schema and config. */
export function spawnNode(script: string, args: readonly string[], env: ChildEnv): Child {
  return spawnWith(['--import', 'tsx', script, ...args], env);
}

function spawnWith(nodeArgs: readonly string[], env: ChildEnv): Child {
  const proc = spawn(process.execPath, nodeArgs, {
    cwd: ROOT,
    env: {
      PATH: process.env.PATH,
      HOME: process.env.HOME,
      DATABASE_URL: env.databaseUrl,
      LARDER_SCHEMA: env.schema,
      LARDER_CONFIG: env.configPath,
      ...(env.redisUrl ? { REDIS_URL: env.redisUrl } : {}),
    },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  let out = '';
  proc.stdout?.on('data', (d: Buffer) => (out += d.toString()));
  proc.stderr?.on('data', (d: Buffer) => (out += d.toString()));
  const done = new Promise<{ code: number | null; signal: NodeJS.Signals | null; output: string }>((res) => {
    proc.on('close', (code, signal) => res({ code, signal, output: out }));
  });
  return { proc, output: () => out, done };
}

/** `node bin/larder.js ...args` as a real child process. */
export function spawnLarder(args: readonly string[], env: ChildEnv): Child {
  return spawnWith([join(ROOT, 'bin/larder.js'), ...args], env);
}

/** Polls `probe` every 50 ms until it returns a truthy value, failing after `ms`. */
export async function waitFor<T>(
  probe: () => Promise<T | undefined | null | false>,
  ms = 30_000,
  what = 'condition',
) {
  const t0 = Date.now();
  for (;;) {
    const v = await probe();
    if (v) return v;
    if (Date.now() - t0 > ms) throw new Error(`timed out after ${ms} ms waiting for ${what}`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

/** A config for runner tests: the small set, the test's own Redis prefix, fast leases. */
export function runnerConfig(
  schema: string,
  pipeline: Record<string, unknown> = {},
  extra: Record<string, unknown> = {},
) {
  return {
    redis: { prefix: schema },
    sets: [SMALL_SET],
    ...extra,
    pipeline: {
      workers: { concurrency: 2, heartbeatSeconds: 0.2, timeoutSeconds: 1, pollSeconds: 0.1 },
      ...pipeline,
    },
  };
}
