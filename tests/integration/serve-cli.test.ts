import { type ChildProcess, execFile, spawn } from 'node:child_process';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';
import { fileURLToPath } from 'node:url';
import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { main } from '../../src/cli/main.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { freePort } from '../helpers/redis-process.js';
import { databaseUrl, redisServerUrl } from '../helpers/servers.js';
import { createSnapshotFixture, type SnapshotFixture } from '../helpers/snapshot-fixture.js';

// `larder publish` and `larder serve` as a user runs them: real processes, exit codes, output.
const prefix = schemaFor(import.meta.url);
const t = useTestDb(import.meta.url);
const bin = fileURLToPath(new URL('../../bin/larder.js', import.meta.url));
const TOKEN = 'cli-test-token-0123456789abcdef';
const dir = mkdtempSync(join(tmpdir(), 'larder-serve-cli-'));
const cfg = join(dir, 'larder.config.json');
let fx: SnapshotFixture;
let env: NodeJS.ProcessEnv;
let redisUrl: string;

beforeAll(async () => {
  redisUrl = await redisServerUrl();
  fx = await createSnapshotFixture(t().db, { cutoff: '2024-11-03', seed: 31, stores: 2, itemsPerStore: 6 });
  writeFileSync(cfg, JSON.stringify({ database: { schema: t().schema }, redis: { prefix } }));
  const { LARDER_TOKENS: _, ...rest } = process.env;
  env = { ...rest, DATABASE_URL: await databaseUrl(), REDIS_URL: redisUrl };
});

afterAll(async () => {
  const raw = new Redis(redisUrl);
  const keys = await raw.keys(`${prefix}:*`);
  if (keys.length) await raw.del(...keys);
  raw.disconnect();
  rmSync(dir, { recursive: true, force: true });
});

function larder(
  args: string[],
  extra: NodeJS.ProcessEnv = {},
): Promise<{ code: number; stdout: string; stderr: string }> {
  return new Promise((resolve) => {
    execFile(
      process.execPath,
      [bin, '-c', cfg, ...args],
      { env: { ...env, ...extra } },
      (err, stdout, stderr) => {
        const code = err ? (typeof err.code === 'number' ? err.code : 1) : 0;
        resolve({ code, stdout, stderr });
      },
    );
  });
}

/** The CLI in this process (faster than a child), capturing what it prints. */
async function inProcess(args: string[]): Promise<{ code: number; stdout: string; stderr: string }> {
  let stdout = '';
  let stderr = '';
  const out = vi.spyOn(process.stdout, 'write').mockImplementation((x) => {
    stdout += String(x);
    return true;
  });
  const err = vi.spyOn(process.stderr, 'write').mockImplementation((x) => {
    stderr += String(x);
    return true;
  });
  try {
    const code = await main(['node', 'larder', '-c', cfg, ...args]);
    return { code, stdout, stderr };
  } finally {
    out.mockRestore();
    err.mockRestore();
  }
}

describe('larder publish', () => {
  it('publishes and reports the version; bad input exits non-zero with the reason', async () => {
    const ok = await inProcess(['publish', '--set', 'daily', '--cutoff', fx.cutoff]);
    expect(ok.stderr).toBe('');
    expect(ok.code).toBe(0);
    expect(ok.stdout).toMatch(
      /^published set daily cutoff 2024-11-03 as version \d+ \(redis\): 12 series, [\d.]+ MB in [\d.]+ s\n$/,
    );
    const bad = await inProcess(['publish', '--set', 'daily', '--cutoff', '2024-11-31']);
    expect(bad.code).toBe(2);
    expect(bad.stderr).toMatch(/cutoff '2024-11-31' is not a valid day/);
    const missing = await inProcess(['publish', '--set', 'daily', '--cutoff', '2024-11-10']);
    expect(missing.code).toBe(1);
    expect(missing.stderr).toMatch(
      /no snapshot of set 'daily' for cutoff 2024-11-10 \(built cutoffs: 2024-11-03\)/,
    );
    const grace = await inProcess(['publish', '--set', 'daily', '--cutoff', fx.cutoff, '--grace', '0']);
    expect(grace.code).toBe(2);
    expect(grace.stderr).toMatch(/--grace must be a positive integer, got '0'/);
  });
});

describe('larder serve', () => {
  let child: ChildProcess | undefined;
  afterAll(() => {
    if (child && child.exitCode === null) child.kill('SIGKILL');
  });

  it('refuses to start without a token', async () => {
    const r = await larder(['serve', '--port', String(await freePort())]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/no tokens configured: set serve.tokens in the config or LARDER_TOKENS/);
  });

  it('serves reads with a token from LARDER_TOKENS and stops cleanly on SIGTERM', async () => {
    const port = await freePort();
    child = spawn(process.execPath, [bin, '-c', cfg, 'serve', '--port', String(port)], {
      env: { ...env, LARDER_TOKENS: TOKEN },
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    let out = '';
    child.stdout!.on('data', (d: Buffer) => {
      out += d.toString();
    });
    const end = Date.now() + 30_000;
    while (!out.includes('serving on') && Date.now() < end && child.exitCode === null) await sleep(50);
    expect(out).toMatch(new RegExp(`serving on http://127.0.0.1:${port} \\(cache: redis, ready\\)`));
    const s = fx.series[2]!;
    const res = await fetch(
      `http://127.0.0.1:${port}/v1/sets/daily/features?${new URLSearchParams({ item: s.item, store: s.store })}`,
      { headers: { authorization: `Bearer ${TOKEN}` } },
    );
    expect(res.status).toBe(200);
    expect(((await res.json()) as { source: string }).source).toBe('cache');
    // The server process runs with the launcher's young generation: two 32 MB semi-spaces
    // (V8 reports the new space's size through the heap-space statistics prom-client exports).
    const metrics = await (
      await fetch(`http://127.0.0.1:${port}/metrics`, { headers: { authorization: `Bearer ${TOKEN}` } })
    ).text();
    expect(metrics).toMatch(/^larder_nodejs_heap_space_size_total_bytes\{space="new"\} 67108864$/m);
    const exited = new Promise<number | null>((r) => child!.once('exit', (code) => r(code)));
    child.kill('SIGTERM');
    expect(await exited).toBe(0);
  });

  it('stops when its launcher is killed without passing a signal on', async () => {
    const port = await freePort();
    const launcher = spawn(process.execPath, [bin, '-c', cfg, 'serve', '--port', String(port)], {
      env: { ...env, LARDER_TOKENS: TOKEN },
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    child = launcher;
    let out = '';
    launcher.stdout!.on('data', (d: Buffer) => {
      out += d.toString();
    });
    const end = Date.now() + 30_000;
    while (!out.includes('serving on') && Date.now() < end && launcher.exitCode === null) await sleep(50);
    expect(out).toContain('serving on');
    const health = `http://127.0.0.1:${port}/health`;
    expect((await fetch(health)).status).toBe(200);
    launcher.kill('SIGKILL');
    let up = true;
    for (const stop = Date.now() + 10_000; up && Date.now() < stop; await sleep(100)) {
      up = await fetch(health).then(
        () => true,
        () => false,
      );
    }
    expect(up, 'the server still answers after its launcher died').toBe(false);
  });
});
