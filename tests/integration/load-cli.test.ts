import { execFile } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { promisify } from 'node:util';
import { afterAll, beforeAll, expect, test, vi } from 'vitest';
import { main } from '../../src/cli/main.js';
import { useTestDb } from '../helpers/db.js';
import { useTempDir } from './load-helpers.js';

const t = useTestDb(import.meta.url);
const file = useTempDir('larder-cli-');
const bin = fileURLToPath(new URL('../../bin/larder.js', import.meta.url));
const saved = { url: process.env.DATABASE_URL, schema: process.env.LARDER_SCHEMA };

beforeAll(() => {
  process.env.DATABASE_URL = t().config.database.url;
  process.env.LARDER_SCHEMA = t().schema;
});
afterAll(() => {
  for (const [k, v] of [
    ['DATABASE_URL', saved.url],
    ['LARDER_SCHEMA', saved.schema],
  ] as const) {
    if (v === undefined) delete process.env[k];
    else process.env[k] = v;
  }
});

/** Runs the CLI in this process, capturing what it prints. */
async function larder(...args: string[]): Promise<{ code: number; stdout: string; stderr: string }> {
  let stdout = '';
  let stderr = '';
  const out = vi.spyOn(process.stdout, 'write').mockImplementation((s) => {
    stdout += String(s);
    return true;
  });
  const err = vi.spyOn(process.stderr, 'write').mockImplementation((s) => {
    stderr += String(s);
    return true;
  });
  try {
    return { code: await main(['node', 'larder', ...args]), stdout, stderr };
  } finally {
    out.mockRestore();
    err.mockRestore();
  }
}

const items = file('items.csv', 'item_id,dept_id,category_id\nI1,D1,C1\n');
const sales = file('sales.csv', 'item_id,store_id,day,units\nI1,S1,2024-01-01,2\nI1,S1,2024-01-02,3\n');
const bad = file('bad.csv', 'item_id,store_id,day,units\nI1,S1,2024-01-03,1.5\nI1,S1,2024-01-01,2\n');

test('larder load prints a per-file summary and exits 0 when everything loaded', async () => {
  const ok = await larder('load', '--items', items, '--sales', sales);
  expect(ok.code).toBe(0);
  expect(ok.stdout).toMatch(/^items +loaded +read 1, stored 1, rejected 0 in [\d.]+ s \([\d,]+ rows\/s\)/m);
  expect(ok.stdout).toMatch(/^sales +loaded +read 2, stored 2, rejected 0/m);
});

test('the real binary exits 1 when a batch was rejected, naming every bad line', async () => {
  const env = { ...process.env };
  const res = await promisify(execFile)(process.execPath, [bin, 'load', '--sales', bad], { env }).then(
    () => ({ code: 0, stdout: '' }),
    (e: { code: number; stdout: string }) => e,
  );
  expect(res.code).toBe(1);
  expect(res.stdout).toContain('line 2: units "1.5" is not an integer');
  expect(res.stdout).toContain('line 3: key already stored: ["I1","S1","2024-01-01"]');
  expect(res.stdout).toContain('nothing from this file was stored');
});

test('--max-rejects lets a file with that many rejects load; hard file errors exit 1; usage errors exit 2', async () => {
  expect((await larder('load', '--sales', bad, '--max-rejects', '2')).code).toBe(0);
  const missing = await larder('load', '--sales', file('cols.csv', 'item_id,store_id,day\n'));
  expect(missing.code).toBe(1);
  expect(missing.stderr).toContain('missing required column "units"');
  expect((await larder('load')).code).toBe(2);
  expect((await larder('load', '--sales', sales, '--max-rejects', 'many')).code).toBe(2);
  expect((await larder('load', '--sales', sales, '--mode', 'merge')).code).toBe(2);
});
