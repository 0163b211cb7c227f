import { runCli } from '../helpers/cli.js';
import { existsSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, expect, test } from 'vitest';
import { useTestDb } from '../helpers/db.js';
import { CUTOFF, seedChain, twoItemChain } from './eval-fixtures.js';
import { makeSnapshot } from './export-fixtures.js';

// `larder export`, `larder scales` and `larder score` as a user calls them: exit codes, output.
const t = useTestDb(import.meta.url);
const dir = mkdtempSync(join(tmpdir(), 'larder-eval-cli-'));
let configFile = '';

function larder(args: string[]) {
  return runCli(['--config', configFile, ...args]);
}

beforeAll(async () => {
  const { db, config } = t();
  configFile = join(dir, 'larder.config.json');
  writeFileSync(
    configFile,
    JSON.stringify({ database: { url: config.database.url, schema: config.database.schema } }),
  );
  await seedChain(db, twoItemChain);
  await makeSnapshot(db, {
    set: 'daily',
    cutoff: '2024-01-31',
    table: 'snap_cli',
    series: 3,
    days: 30,
    horizon: 7,
  });
});

test('larder scales prints the levels; larder score prints the table and JSON', async () => {
  const s = await larder(['scales', '--cutoff', CUTOFF, '--weight-days', '2']);
  expect(s.code).toBe(0);
  // The snapshot's chain adds series without sales: they are counted, not evaluated.
  expect(s.out).toMatch(/2 of 10 bottom series evaluated, dollar sales 41\.00/);
  expect(s.out).toMatch(/12 {2}item_store\s+10\s+8/);
  const f = join(dir, 'f.csv');
  writeFileSync(
    f,
    'item_id,store_id,day,value\nA,S1,2024-01-09,3\nA,S1,2024-01-10,3\nB,S1,2024-01-09,2\nB,S1,2024-01-10,2\n',
  );
  const table = await larder([
    'score',
    '--cutoff',
    CUTOFF,
    '--forecasts',
    f,
    '--weight-days',
    '2',
    '--series-out',
    join(dir, 's.csv'),
  ]);
  expect(table.code).toBe(0);
  expect(table.out).toMatch(/WRMSSE\s+0\.3964\s+0\.3964\s+\d/); // (9 x 0.2853 + 3 x 0.7297) / 12, REFERENCES.md §5.3
  expect(readFileSync(join(dir, 's.csv'), 'utf8').split('\n')[0]).toBe(
    'level,level_name,key,scale,weight,rmsse_f.csv,rmsse_naive,rmsse_seasonal_naive',
  );
  const json = await larder(['score', '--cutoff', CUTOFF, '--forecasts', f, '--weight-days', '2', '--json']);
  const parsed = JSON.parse(json.out);
  expect(parsed.sources[0].wrmsse).toBeCloseTo((9 * 0.2852987011 + 3 * 0.7296910077) / 12, 9);
});

test('bad input: a refused forecasts file exits 1 naming the offender, a bad option exits 2', async () => {
  const f = join(dir, 'bad.csv');
  writeFileSync(f, 'item_id,store_id,day,value\nA,S1,2024-01-09,3\n');
  const bad = await larder(['score', '--cutoff', CUTOFF, '--forecasts', f, '--horizon', '2']);
  expect(bad.code).toBe(1);
  expect(bad.err).toMatch(/bad\.csv: forecasts refused, nothing was written:\n {2}missing rows/);
  expect((await larder(['score', '--cutoff', '2024-02-30', '--horizon', '2'])).code).toBe(2);
  expect((await larder(['score', '--cutoff', CUTOFF, '--horizon', '0'])).code).toBe(2);
  expect(
    (await larder(['export', '--set', 'daily', '--cutoff', '2024-01-31', '--out', 'x', '--format', 'xls']))
      .code,
  ).toBe(2);
});

test('larder export writes the file and its manifest; an unknown set exits 1', async () => {
  const out = join(dir, 'daily.csv');
  const r = await larder([
    'export',
    '--set',
    'daily',
    '--cutoff',
    '2024-01-31',
    '--out',
    out,
    '--format',
    'csv',
    '--rows',
    'predict',
    '--json',
  ]);
  expect(r.code).toBe(0);
  expect(JSON.parse(r.out)).toMatchObject({ rowCount: 21, path: out });
  expect(existsSync(`${out}.manifest.json`)).toBe(true);
  const missing = await larder([
    'export',
    '--set',
    'nope',
    '--cutoff',
    '2024-01-31',
    '--out',
    join(dir, 'n.parquet'),
  ]);
  expect(missing.code).toBe(1);
  expect(missing.err).toMatch(/no snapshot of set 'nope' at cutoff 2024-01-31/);
});
