import { execFile } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { promisify } from 'node:util';
import { expect, test } from 'vitest';
import { useTestDb } from '../helpers/db.js';
import { useTempDir } from './load-helpers.js';

const t = useTestDb(import.meta.url);
const file = useTempDir('larder-cli-');
const bin = fileURLToPath(new URL('../../bin/larder.js', import.meta.url));

async function larder(...args: string[]): Promise<{ code: number; stdout: string; stderr: string }> {
  const { config, schema } = t();
  const env = { ...process.env, DATABASE_URL: config.database.url, LARDER_SCHEMA: schema };
  try {
    const { stdout, stderr } = await promisify(execFile)(process.execPath, [bin, ...args], { env });
    return { code: 0, stdout, stderr };
  } catch (e) {
    const err = e as { code: number; stdout: string; stderr: string };
    return { code: err.code, stdout: err.stdout, stderr: err.stderr };
  }
}

test('larder load: 0 when everything loaded, 1 when a batch was rejected, 2 on usage errors', async () => {
  const items = file('items.csv', 'item_id,dept_id,category_id\nI1,D1,C1\n');
  const sales = file('sales.csv', 'item_id,store_id,day,units\nI1,S1,2024-01-01,2\nI1,S1,2024-01-02,3\n');
  const ok = await larder('load', '--items', items, '--sales', sales);
  expect(ok.code).toBe(0);
  expect(ok.stdout).toMatch(/^items +loaded +read 1, stored 1, rejected 0 in [\d.]+ s/m);
  expect(ok.stdout).toMatch(/^sales +loaded +read 2, stored 2, rejected 0/m);

  const bad = file('bad.csv', 'item_id,store_id,day,units\nI1,S1,2024-01-03,1.5\nI1,S1,2024-01-01,2\n');
  const rejected = await larder('load', '--sales', bad);
  expect(rejected.code).toBe(1);
  expect(rejected.stdout).toContain('line 2: units "1.5" is not an integer');
  expect(rejected.stdout).toContain('line 3: key already stored: ["I1","S1","2024-01-01"]');
  expect(rejected.stdout).toContain('nothing from this file was stored');
  // With room for two rejects the file loads (nothing valid is left in it, so nothing lands).
  expect((await larder('load', '--sales', bad, '--max-rejects', '2')).code).toBe(0);

  expect((await larder('load')).code).toBe(2);
  expect((await larder('load', '--sales', sales, '--max-rejects', 'many')).code).toBe(2);
  expect((await larder('load', '--sales', sales, '--mode', 'merge')).code).toBe(2);
  const missing = await larder('load', '--sales', file('cols.csv', 'item_id,store_id,day\n'));
  expect(missing.code).toBe(1);
  expect(missing.stderr).toContain('missing required column "units"');
});
