import { execFile } from 'node:child_process';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { promisify } from 'node:util';
import { beforeAll, describe, expect, test } from 'vitest';
import { useTestDb } from '../../helpers/db.js';
import { addCalendar, addItems, addSeries, addStores, clearTables } from './fixture.js';

const t = useTestDb(import.meta.url);
const bin = resolve('bin/larder.js');
const run = promisify(execFile);
const dir = mkdtempSync(join(tmpdir(), 'larder-check-cli-'));

/** Runs the real CLI as a child process against this file's schema. */
async function larder(args: string[], env: Record<string, string> = {}) {
  const { config, schema } = t();
  try {
    const r = await run(process.execPath, [bin, ...args], {
      cwd: dir,
      env: {
        PATH: process.env.PATH ?? '',
        DATABASE_URL: config.database.url!,
        LARDER_SCHEMA: schema,
        ...env,
      },
    });
    return { code: 0, stdout: r.stdout, stderr: r.stderr };
  } catch (err) {
    const e = err as { code: number; stdout: string; stderr: string };
    return { code: e.code, stdout: e.stdout, stderr: e.stderr };
  }
}

const ONLY = ['--only', 'units-sanity,series-gaps,freshness'];

beforeAll(async () => {
  const { db } = t();
  await clearTables(db);
  await addItems(db, [['E', 'D1', 'C1']]);
  await addStores(db, [['S1', 'R1']]);
  await addCalendar(db, '2024-01-01', '2024-02-29');
  const units = Array.from({ length: 40 }, (): number | null => 1);
  units[4] = -2; // 2024-01-05: negative units block
  units[20] = null; // 2024-01-21: a gap warns
  await addSeries(db, 'E', 'S1', '2024-01-01', units);
});

describe('larder check gating', () => {
  test('a blocking finding exits 1 with a summary grouped by check', async () => {
    const r = await larder(['check', ...ONLY]);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(/BLOCKED; 1 blocking/);
    expect(r.stdout).toMatch(/units-sanity\s+BLOCK\s+1/);
    expect(r.stdout).toContain('negative-units: item E store S1: -2 units on 2024-01-05');
  });

  test('--json prints one object per finding with the documented fields', async () => {
    const r = await larder(['check', ...ONLY, '--json']);
    expect(r.code).toBe(1);
    const rows = r.stdout
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l) as Record<string, unknown>);
    expect(rows.length).toBe(3); // negative units, the gap, stale data (today is long after 2024)
    for (const row of rows) {
      for (const k of [
        'check',
        'severity',
        'item_id',
        'store_id',
        'region_id',
        'first_day',
        'last_day',
        'week_start',
        'observed',
        'threshold',
        'message',
      ]) {
        expect(row).toHaveProperty(k);
      }
    }
    expect(rows[0]).toMatchObject({
      check: 'units-sanity',
      severity: 'block',
      item_id: 'E',
      store_id: 'S1',
      region_id: 'R1',
      first_day: '2024-01-05',
      last_day: '2024-01-05',
      week_start: null,
      observed: -2,
      threshold: 0,
    });
    expect(r.stderr).toMatch(/BLOCKED/); // the summary moves to stderr
  });

  test('after a waiver only warnings remain: exit 0, the waived finding still listed', async () => {
    const w = await larder([
      'waive',
      '--check',
      'units-sanity',
      '--item',
      'E',
      '--store',
      'S1',
      '--from',
      '2024-01-01',
      '--to',
      '2024-01-31',
      '--reason',
      'a real return',
    ]);
    expect(w.code).toBe(0);
    expect(w.stdout).toMatch(/waiver #\d+ added for units-sanity/);
    const r = await larder(['check', ...ONLY]);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/nothing blocks; 0 blocking, 2 warning\(s\), 0 info, 1 waived/);
    expect(r.stdout).toMatch(/negative-units: item E store S1: -2 units on 2024-01-05 \[waived #\d+\]/);
    const j = await larder(['check', ...ONLY, '--json']);
    const neg = j.stdout
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l))
      .find((x) => x.check === 'units-sanity');
    expect(neg).toMatchObject({ waived: true, severity: 'block' });
    const list = await larder(['waive', '--list']);
    expect(list.stdout).toMatch(
      /#\d+ units-sanity \[item E, store S1, days 2024-01-01\.\.2024-01-31\]: a real return/,
    );
  });

  test('--report writes a self-contained HTML file', async () => {
    const r = await larder(['check', ...ONLY, '--report', 'out/report.html']);
    expect(r.code).toBe(0);
    const html = readFileSync(join(dir, 'out/report.html'), 'utf8');
    expect(html).toMatch(/^<!doctype html>/);
    expect(html).not.toMatch(/<link |src="http|href="http/);
    for (const name of ['units-sanity', 'series-gaps', 'freshness']) expect(html).toContain(name);
  });

  test('usage and config errors exit 2', async () => {
    writeFileSync(join(dir, 'bad.json'), JSON.stringify({ checks: { 'price-spikes': { threshold: 0 } } }));
    const [unknown, badDay, badConfig, noReason] = await Promise.all([
      larder(['check', '--only', 'nope']),
      larder(['check', '--cutoff', '2024-02-30']),
      larder(['check'], { LARDER_CONFIG: 'bad.json' }),
      larder(['waive', '--check', 'units-sanity']),
    ]);
    expect(unknown.code).toBe(2);
    expect(unknown.stderr).toMatch(/unknown check 'nope'/);
    expect(badDay.code).toBe(2);
    expect(badDay.stderr).toMatch(/--cutoff: '2024-02-30' is not a valid day/);
    expect(badConfig.code).toBe(2);
    expect(badConfig.stderr).toContain('checks.price-spikes.threshold: expected a number > 0');
    expect(noReason.code).toBe(2);
    expect(noReason.stderr).toMatch(/--reason <text> is required/);
  });
});
