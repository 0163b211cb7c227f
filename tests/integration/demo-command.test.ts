import { runCli } from '../helpers/cli.js';
import { spawn } from 'node:child_process';
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { Redis } from 'ioredis';
import { databaseUrl } from '../helpers/servers.js';

// `larder demo` on the real server (in this process) and, as a user runs it, in its own process
// on the embedded database.

const BIN = resolve(import.meta.dirname, '../../bin/larder.js');
const t = useTestDb(import.meta.url);
const demoSchema = schemaFor(import.meta.url, '-demo');
const foreignSchema = schemaFor(import.meta.url, '-foreign');
let root: string;
let data: string;

/** Runs the CLI in this process, capturing what it prints. */
function larderHere(args: string[]) {
  return runCli(args);
}

/** Runs the CLI as a user does: its own process, its own working folder and environment. */
function larderProcess(args: string[], env: Record<string, string>, cwd: string) {
  return new Promise<{ code: number | null; out: string; err: string }>((done) => {
    const base = { ...process.env };
    delete base.DATABASE_URL;
    delete base.REDIS_URL;
    delete base.LARDER_SCHEMA;
    delete base.LARDER_CONFIG;
    const child = spawn(process.execPath, [BIN, ...args], { cwd, env: { ...base, ...env } });
    let out = '';
    let err = '';
    child.stdout.on('data', (c) => {
      out += c;
    });
    child.stderr.on('data', (c) => {
      err += c;
    });
    child.on('close', (code) => done({ code, out, err }));
  });
}

beforeAll(async () => {
  // The in-process runs use the test server, as `larder` does when DATABASE_URL is set.
  process.env.DATABASE_URL = await databaseUrl();
  root = mkdtempSync(join(tmpdir(), 'larder-demo-cmd-'));
  data = join(root, 'chain');
});
/** The cache keys the server demo published under its schema's prefix (none without REDIS_URL). */
async function demoKeys(del = false): Promise<number> {
  if (!process.env.REDIS_URL) return 0;
  const redis = new Redis(process.env.REDIS_URL);
  try {
    const keys = await redis.keys(`${demoSchema}:*`);
    if (del && keys.length) await redis.del(...keys);
    return keys.length;
  } finally {
    redis.disconnect();
  }
}

afterAll(async () => {
  await demoKeys(true);
  for (const s of [demoSchema, foreignSchema]) await t().db.exec(`DROP SCHEMA IF EXISTS "${s}" CASCADE`);
  rmSync(root, { recursive: true, force: true });
});

describe('larder demo', () => {
  test('--generate writes the chain and reports its rate', async () => {
    const r = await larderHere([
      'demo',
      '--generate',
      data,
      '--stores',
      '2',
      '--items',
      '12',
      '--days',
      '200',
    ]);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    expect(r.out).toMatch(/sales lines in .* s \(\d+\.\d\dM rows\/s\)/);
    for (const f of ['faults.json', 'sales.csv', 'corrections/sales.csv'])
      expect(existsSync(join(data, f))).toBe(true);
  });

  test('runs against the server: reset, load, summary equal to the generator totals, twice', async () => {
    for (let run = 0; run < 2; run++) {
      const r = await larderHere(['demo', '--data', data, '--schema', demoSchema]);
      expect(r.code, r.err).toBe(0);
      expect(r.out).toContain('using the chain already in');
      expect(r.out).toContain(`schema ${demoSchema} (server): dropped and migrated`);
      expect(r.out.match(/ same( \(sum in cents\))?\n/g)).toHaveLength(8);
      expect(r.out).not.toContain('expected');
      expect(r.out).toMatch(
        /== time per step ==\n {2}generate .*\n {2}reset schema .*\n {2}load .*\n {2}summary/,
      );
    }
    // With a Redis, the demo publishes under its schema's prefix (cleaned up after the file).
    if (process.env.REDIS_URL) expect(await demoKeys()).toBeGreaterThan(0);
  });

  test('refuses to drop a schema it did not make, and leaves it alone', async () => {
    const { db } = t();
    await db.exec(`CREATE SCHEMA "${foreignSchema}"; CREATE TABLE "${foreignSchema}".precious (x int)`);
    const r = await larderHere(['demo', '--data', data, '--schema', foreignSchema]);
    expect(r.code).toBe(2);
    expect(r.err).toContain(`schema ${foreignSchema} holds tables the demo did not make`);
    const still = await db.query(`SELECT 1 FROM pg_tables WHERE schemaname = $1 AND tablename = 'precious'`, [
      foreignSchema,
    ]);
    expect(still.rowCount).toBe(1);
  });

  test('usage errors exit 2 and say what was wrong', async () => {
    const size = await larderHere(['demo', '--stores', '5']);
    expect(size.code).toBe(2);
    expect(size.err).toContain('--stores only apply with --generate');
    const days = await larderHere(['demo', '--generate', join(root, 'x'), '--days', 'ten']);
    expect(days.code).toBe(2);
    expect(days.err).toContain("--days: expected a whole number >= 112, got 'ten'");
    const schema = await larderHere(['demo', '--schema', 'Bad-Name']);
    expect(schema.code).toBe(2);
    expect(schema.err).toContain("--schema: 'Bad-Name' is not a schema name");
  });

  test('runs on the embedded database when DATABASE_URL is unset', async () => {
    const r = await larderProcess(['demo', '--data', data], {}, root);
    expect(r.code, r.err).toBe(0);
    expect(r.out).toContain('embedded database');
    expect(r.out).toContain('schema larder_demo (embedded): dropped and migrated');
    expect(r.out.match(/ same( \(sum in cents\))?\n/g)).toHaveLength(8);
    expect(existsSync(join(root, '.larder/pgdata'))).toBe(true);
  });
});
