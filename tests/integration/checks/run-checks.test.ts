import { beforeAll, describe, expect, test } from 'vitest';
import { runChecks } from '../../../src/checks/run-checks.js';
import { addWaiver, listWaivers, revokeWaiver } from '../../../src/checks/waivers.js';
import { parseConfig } from '../../../src/config/config.js';
import { ConfigError, UsageError } from '../../../src/db/errors.js';
import { useTestDb } from '../../helpers/db.js';
import { addCalendar, addItems, addSeries, addStores, clearTables } from './fixture.js';

const t = useTestDb(import.meta.url);
const rep = (v: number, n: number) => Array.from({ length: n }, () => v);
const withChecks = (checks: Record<string, unknown>) =>
  parseConfig({ database: t().config.database, checks }, 'test');

beforeAll(async () => {
  const { db } = t();
  await clearTables(db);
  await addItems(db, [
    ['A', 'D1', 'C1'],
    ['B', 'D1', 'C1'],
    ['E', 'D1', 'C1'],
  ]);
  await addStores(db, [['S1', 'R1']]);
  await addCalendar(db, '2024-01-01', '2024-03-31');
  // 2024-01-01 .. 2024-02-11 (42 days). A sells 12 a day, B 8, E 1; on 2024-02-06 A has no row,
  // so the chain sells 9 against a same-weekday median of 21: below 50% (10.5).
  const a = rep(12, 42);
  a[36] = Number.NaN;
  await addSeries(db, 'A', 'S1', '2024-01-01', a);
  await addSeries(db, 'B', 'S1', '2024-01-01', rep(8, 42));
  // E: a return on 2024-01-05 (negative units block).
  const e = rep(1, 42);
  e[4] = -2;
  await addSeries(db, 'E', 'S1', '2024-01-01', e);
});

describe('volume-drop', () => {
  test('the partial day blocks', async () => {
    const { db, config } = t();
    const r = await runChecks(db, config, { only: ['volume-drop'] });
    expect(
      r.findings.map((f) => [f.code, f.severity, f.firstDay, f.observed, f.threshold, f.details]),
    ).toEqual([
      ['volume-drop', 'block', '2024-02-06', 9, 10.5, { median: 21, ratio: 9 / 21, weeks: 4, events: [] }],
    ]);
  });
});

describe('series-gaps', () => {
  test('a day most series lack is reported once, not held against each series', async () => {
    const { db } = t();
    // On 2024-02-06 one of three active series has no row: 33% absent.
    const lax = await runChecks(db, withChecks({}), { only: ['series-gaps'] });
    expect(lax.findings.map((f) => [f.code, f.itemId, f.firstDay, f.observed])).toEqual([
      ['series-gaps', 'A', '2024-02-06', 1],
    ]);
    const strict = await runChecks(db, withChecks({ 'series-gaps': { chainShare: 0.3 } }), {
      only: ['series-gaps'],
    });
    expect(strict.findings.map((f) => [f.code, f.itemId, f.firstDay, f.observed, f.details])).toEqual([
      ['chain-missing-days', null, '2024-02-06', 1 / 3, { series_missing: 1, active_series: 3 }],
    ]);
  });
});

describe('freshness', () => {
  test('within the lag: nothing; beyond it: a warning, or a block in scheduled runs', async () => {
    const { db, config } = t();
    // Newest sales day 2024-02-11.
    expect((await runChecks(db, config, { only: ['freshness'], today: '2024-02-12' })).findings).toEqual([]);
    const late = await runChecks(db, config, { only: ['freshness'], today: '2024-02-14' });
    expect(late.findings.map((f) => [f.code, f.severity, f.lastDay, f.observed, f.threshold])).toEqual([
      ['stale', 'warn', '2024-02-11', 3, 1],
    ]);
    expect(late.blocking).toBe(0);
    const sched = await runChecks(db, config, { only: ['freshness'], today: '2024-02-14', scheduled: true });
    expect(sched.findings.map((f) => f.severity)).toEqual(['block']);
    expect(sched.status).toBe('blocked');
  });

  test('the cutoff is the expected day when given; a configured day and lag otherwise', async () => {
    const { db, config } = t();
    const r = await runChecks(db, config, { only: ['freshness'], cutoff: '2024-02-20', today: '2030-01-01' });
    expect(r.findings.map((f) => f.details)).toEqual([
      { newest_day: '2024-02-11', expected_cutoff: '2024-02-20', lag_days: 1 },
    ]);
    const fixed = withChecks({ freshness: { expectedCutoff: '2024-02-11', lagDays: 0 } });
    expect((await runChecks(db, fixed, { only: ['freshness'], scheduled: true })).findings).toEqual([]);
    const soft = withChecks({ freshness: { severity: 'info' } });
    const s = await runChecks(db, soft, { only: ['freshness'], today: '2024-03-01', scheduled: true });
    expect(s.findings.map((f) => f.severity)).toEqual(['info']);
  });

  test('no sales up to the cutoff blocks', async () => {
    const { db, config } = t();
    const r = await runChecks(db, config, { only: ['freshness'], cutoff: '2023-12-31' });
    expect(r.findings.map((f) => [f.code, f.severity, f.message])).toEqual([
      ['no-sales', 'block', 'no sales rows on or before 2023-12-31'],
    ]);
  });
});

describe('waivers', () => {
  test('a waiver covering the finding stops it blocking; it still shows, marked', async () => {
    const { db, config } = t();
    const before = await runChecks(db, config, { only: ['units-sanity'] });
    expect(before.blocking).toBe(1);
    const w = await addWaiver(db, {
      check: 'units-sanity',
      itemId: 'E',
      storeId: 'S1',
      fromDay: '2024-01-01',
      toDay: '2024-01-31',
      reason: 'a real return',
    });
    const after = await runChecks(db, config, { only: ['units-sanity'], today: '2024-03-01' });
    expect(after).toMatchObject({ status: 'passed', blocking: 0, waived: 1 });
    expect(after.findings.map((f) => [f.code, f.severity, f.waivedBy])).toEqual([
      ['negative-units', 'block', w.waiverId],
    ]);
    expect(after.checks[0]).toMatchObject({ status: 'passed', blocking: 0, waived: 1 });
    await revokeWaiver(db, w.waiverId);
    expect((await runChecks(db, config, { only: ['units-sanity'] })).blocking).toBe(1);
  });

  test('an expired waiver, another item, a window not containing the days, another code: no effect', async () => {
    const { db, config } = t();
    await addWaiver(db, { check: 'units-sanity', itemId: 'E', reason: 'expired', until: '2024-02-01' });
    await addWaiver(db, { check: 'units-sanity', itemId: 'A', reason: 'other item' });
    await addWaiver(db, {
      check: 'units-sanity',
      fromDay: '2024-01-06',
      toDay: '2024-01-31',
      reason: 'later days',
    });
    await addWaiver(db, { check: 'units-sanity', code: 'units-spike', reason: 'promotions' });
    const r = await runChecks(db, config, { only: ['units-sanity'], today: '2024-03-01' });
    expect(r).toMatchObject({ blocking: 1, waived: 0 });
    // The expired one applied while it was valid.
    const early = await runChecks(db, config, { only: ['units-sanity'], today: '2024-02-01' });
    expect(early).toMatchObject({ blocking: 0, waived: 1 });
    expect((await listWaivers(db)).length).toBe(5);
  });

  test('bad waiver input is refused with the option named', async () => {
    const { db } = t();
    await expect(addWaiver(db, { check: 'units', reason: 'x' })).rejects.toThrow(
      /--check: unknown check 'units'/,
    );
    await expect(addWaiver(db, { check: 'units-sanity', reason: '  ' })).rejects.toThrow(/--reason/);
    await expect(
      addWaiver(db, { check: 'units-sanity', reason: 'x', fromDay: '2024-02-01', toDay: '2024-01-01' }),
    ).rejects.toThrow(/--from 2024-02-01 is after --to 2024-01-01/);
    await expect(addWaiver(db, { check: 'units-sanity', reason: 'x', until: '2024-13-01' })).rejects.toThrow(
      /--until/,
    );
    await expect(addWaiver(db, { check: 'units-sanity', reason: 'x', code: 'stockout' })).rejects.toThrow(
      UsageError,
    );
  });
});

describe('runs', () => {
  test('unknown names in --only and bad days are usage errors; bad parameters config errors', async () => {
    const { db, config } = t();
    await expect(runChecks(db, config, { only: ['volume-drops'] })).rejects.toThrow(
      /unknown check 'volume-drops'/,
    );
    await expect(runChecks(db, config, { cutoff: '2024-02-30' })).rejects.toBeInstanceOf(UsageError);
    const raw = { ...config, checks: { 'volume-drop': { minShare: 2 } } } as unknown as typeof config;
    await expect(runChecks(db, raw, { only: ['volume-drop'] })).rejects.toThrow(
      /checks\.volume-drop\.minShare: expected a number between 0 and 1/,
    );
    await expect(runChecks(db, raw, { only: ['volume-drop'] })).rejects.toBeInstanceOf(ConfigError);
  });

  test('disabled checks do not run unless named in --only', async () => {
    const { db } = t();
    const cfg = withChecks({ 'units-sanity': { enabled: false } });
    const all = await runChecks(db, cfg, {});
    expect(all.checks.map((c) => c.check)).not.toContain('units-sanity');
    expect(all.checks).toHaveLength(9);
    const named = await runChecks(db, cfg, { only: ['units-sanity'] });
    expect(named.checks.map((c) => c.check)).toEqual(['units-sanity']);
  });

  test('a check that cannot run blocks with check-failed; the others still run', async () => {
    const { db, config } = t();
    await db.exec('ALTER TABLE benefit_days RENAME TO benefit_days_away');
    try {
      const r = await runChecks(db, config, { only: ['calendar-coverage', 'volume-drop', 'series-gaps'] });
      const cal = r.checks.find((c) => c.check === 'calendar-coverage')!;
      expect(cal.status).toBe('failed');
      expect(cal.error).toMatch(/benefit_days/);
      expect(r.status).toBe('failed');
      expect(
        r.findings.filter((f) => f.check === 'calendar-coverage').map((f) => [f.code, f.severity]),
      ).toEqual([['check-failed', 'block']]);
      expect(r.checks.find((c) => c.check === 'volume-drop')).toMatchObject({
        status: 'blocked',
        blocking: 1,
      });
      expect(r.checks.find((c) => c.check === 'series-gaps')).toMatchObject({
        status: 'warned',
        error: null,
      });
      // Even a check-wide waiver does not hide a failure.
      await addWaiver(db, { check: 'calendar-coverage', reason: 'trying to hide a failure' });
      const again = await runChecks(db, config, { only: ['calendar-coverage'] });
      expect(again).toMatchObject({ blocking: 1, waived: 0 });
    } finally {
      await db.exec('ALTER TABLE benefit_days_away RENAME TO benefit_days');
    }
  });

  test('the run and per-check rows are stored', async () => {
    const { db, config } = t();
    const r = await runChecks(db, config, { only: ['volume-drop', 'units-sanity'], cutoff: '2024-02-10' });
    const run = await db.query<Record<string, unknown>>('SELECT * FROM check_runs WHERE run_id = $1', [
      r.runId,
    ]);
    expect(run.rows[0]).toMatchObject({
      status: r.status,
      cutoff: '2024-02-10',
      only: ['volume-drop', 'units-sanity'],
      first_day: '2024-01-01',
      last_day: '2024-02-10',
      sales_rows: 41 * 3 - 1,
      series_seen: 3,
    });
    expect(run.rows[0]!.finished_at).not.toBeNull();
    const days = await db.query<{ n: number; u: number }>(
      'SELECT count(*)::int AS n, sum(units)::float8 AS u FROM check_run_days WHERE run_id = $1',
      [r.runId],
    );
    expect(days.rows[0]).toEqual({ n: 41, u: 41 * 21 - 12 - 3 });
    const results = await db.query('SELECT "check", status FROM check_results WHERE run_id = $1 ORDER BY 1', [
      r.runId,
    ]);
    expect(results.rows).toEqual([
      { check: 'units-sanity', status: 'blocked' },
      { check: 'volume-drop', status: 'blocked' },
    ]);
  });
});
