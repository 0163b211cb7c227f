import { runCli } from '../../helpers/cli.js';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl } from '../../helpers/servers.js';
import { insertChain } from './chain-fixture.js';

const sets = [
  {
    name: 'cli_set',
    horizon: 7,
    training: { days: 30 },
    families: {
      lags: { days: [7] },
      windows: [{ size: 7, shift: 7, stats: ['mean'] }],
      calendar: { features: ['day_of_week'] },
      encodings: [{ groups: ['item'], window: 14 }],
    },
  },
];
const t = useTestDb(import.meta.url, { sets });
let dir: string;
let configPath: string;

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'larder-build-cli-'));
  configPath = join(dir, 'larder.config.json');
  writeFileSync(
    configPath,
    JSON.stringify({ database: { url: await databaseUrl(), schema: t().schema }, sets }),
  );
  await insertChain(t().db, { stores: 2, items: 3, start: '2023-01-01', days: 130 });
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** Runs the CLI in this process, capturing what it prints. */
function larder(...args: string[]) {
  return runCli(['-c', configPath, ...args]);
}

test('larder sets lists features and the definition hash', async () => {
  const r = await larder('sets', '--json');
  expect(r.code).toBe(0);
  const s = JSON.parse(r.out.trim());
  expect(s).toMatchObject({
    name: 'cli_set',
    horizon: 7,
    mode: 'shift',
    families: ['lags', 'windows', 'calendar', 'encodings'],
  });
  expect(s.features.map((f: { name: string }) => f.name)).toEqual([
    'lag_7',
    'mean_7d_s7',
    'day_of_week',
    'enc_item_14d_s7',
  ]);
  expect(s.definitionHash).toMatch(/^[0-9a-f]{64}$/);
});

test('larder build: one cutoff, backtest folds, latest; larder snapshots lists them', async () => {
  const one = await larder('build', '--set', 'cli_set', '--cutoff', '2023-04-20');
  expect(one.code, one.err).toBe(0);
  expect(one.out).toMatch(
    /^cli_set @ 2023-04-20: feat_cli_set_20230420_\w+ {2}\d+ rows \(\d+ training from 2023-03-22, 42 prediction\)/,
  );
  const folds = await larder(
    'build',
    '--set',
    'cli_set',
    '--cutoff',
    '2023-05-01',
    '--backtest',
    '3',
    '--every',
    '7',
    '--json',
  );
  expect(folds.code, folds.err).toBe(0);
  expect(
    folds.out
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l).cutoff),
  ).toEqual(['2023-04-17', '2023-04-24', '2023-05-01']);
  const latest = await larder('build', '--set', 'cli_set', '--cutoff', 'latest', '--json');
  expect(JSON.parse(latest.out).cutoff).toBe('2023-05-10');
  const list = await larder('snapshots', '--json');
  const cutoffs = list.out
    .trim()
    .split('\n')
    .map((l) => JSON.parse(l).cutoff);
  expect(cutoffs).toEqual(['2023-05-10', '2023-05-01', '2023-04-24', '2023-04-20', '2023-04-17']);
  const table = await larder('snapshots');
  expect(table.out.split('\n')[0]).toMatch(/^set\s+cutoff\s+table\s+rows/);
});

test('larder audit reports no leak and exits 0', async () => {
  const r = await larder(
    'audit',
    '--set',
    'cli_set',
    '--cutoff',
    '2023-04-20',
    '--sample',
    '2',
    '--probes',
    '1',
  );
  expect(r.code, r.err + r.out).toBe(0);
  expect(r.out).toContain('no cell changed: no leak found');
});

test('usage and config errors exit 2 with a message', async () => {
  const noSet = await larder('build', '--set', 'nope', '--cutoff', '2023-04-20');
  expect(noSet.code).toBe(2);
  expect(noSet.err).toContain("no feature set named 'nope' in the config (known: cli_set)");
  const noCutoff = await larder('build', '--set', 'cli_set');
  expect(noCutoff.code).toBe(2);
  expect(noCutoff.err).toContain('give --cutoff DAY');
  const badDay = await larder('build', '--set', 'cli_set', '--cutoffs', '2023-04-20,2023-13-01');
  expect(badDay.code).toBe(2);
  expect(badDay.err).toContain("--cutoffs: '2023-13-01' is not an ISO 8601 day");
  const both = await larder('build', '--set', 'cli_set', '--cutoff', '2023-04-20', '--cutoffs', '2023-04-20');
  expect(both.code).toBe(2);
  const audit = await larder('audit', '--set', 'cli_set');
  expect(audit.code).toBe(2);
});
