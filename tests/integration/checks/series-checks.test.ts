import { beforeAll, describe, expect, test } from 'vitest';
import type { Finding } from '../../../src/checks/finding.js';
import { type CheckRunResult, runChecks } from '../../../src/checks/run-checks.js';
import { useTestDb } from '../../helpers/db.js';
import { addCalendar, addItems, addSeries, addStores, clearTables } from './fixture.js';

const t = useTestDb(import.meta.url);
const rep = (v: number, n: number) => Array.from({ length: n }, () => v);
const pick = (f: Finding) => [
  f.code,
  f.severity,
  f.itemId,
  f.firstDay,
  f.lastDay,
  f.detectableDay,
  f.observed,
  f.threshold,
];

let run: CheckRunResult;
const of = (check: string) => run.findings.filter((f) => f.check === check).map(pick);

beforeAll(async () => {
  const { db, config } = t();
  await clearTables(db);
  await addItems(
    db,
    ['A', 'B', 'C', 'D', 'E', 'F', 'G', 'H'].map((i) => [i, 'D1', 'C1'] as [string, string, string]),
  );
  await addStores(db, [['S1', 'R1']]);
  await addCalendar(db, '2024-01-01', '2024-03-31');
  // A: rate 3/day for 14 days (variance 0: Poisson, p0 = e^-3, k* = ceil(13.8155 / 3) = 5 at
  // alpha 1e-6), then 5 zeros (a stock-out from 2024-01-15, detectable on its 5th day, 01-19),
  // 5 days of 3, 4 zeros (plausible: 4 < 5), 3 days of 3.
  await addSeries(db, 'A', 'S1', '2024-01-01', [
    ...rep(3, 14),
    ...rep(0, 5),
    ...rep(3, 5),
    ...rep(0, 4),
    ...rep(3, 3),
  ]);
  // B: 10 zeros before its first sale (pre-launch), 14 days of 3, then 6 zeros open at its end.
  await addSeries(db, 'B', 'S1', '2024-01-01', [...rep(0, 10), ...rep(3, 14), ...rep(0, 6)]);
  // C: stored days, never a sale.
  await addSeries(db, 'C', 'S1', '2024-01-01', rep(0, 20));
  // D: days 2-4 and 6 have no row: 4 missing days in 2 gaps, the longest 01-03..01-05.
  await addSeries(db, 'D', 'S1', '2024-01-01', [1, 1, null, null, null, 1, null, 1]);
  // E: negative units on 01-02..01-03 (lowest -3) and on 01-06.
  await addSeries(db, 'E', 'S1', '2024-01-01', [2, -1, -3, 2, 2, -1, 2]);
  // F: 28 days of 1 then 12: window median 1, MAD 0, mean deviation 0 -> one-unit floor, z = 11 > 10.
  await addSeries(db, 'F', 'S1', '2024-01-01', [...rep(1, 28), 12]);
  // G: the same with 11: z = 10, not above 10.
  await addSeries(db, 'G', 'S1', '2024-01-01', [...rep(1, 28), 11]);
  // H: a series known to the series table with no sales rows at all.
  await db.query(`INSERT INTO series (item_id, store_id) VALUES ('H', 'S1')`);
  run = await runChecks(db, config, { only: ['stockout-zeros', 'series-gaps', 'units-sanity'] });
});

describe('stockout-zeros', () => {
  test('exact findings: stock-out, pre-launch, open run, never sold', () => {
    expect(of('stockout-zeros')).toEqual([
      ['stockout', 'warn', 'A', '2024-01-15', '2024-01-19', '2024-01-19', 5, 5],
      ['open-zero-run', 'info', 'B', '2024-01-25', '2024-01-30', '2024-01-29', 6, 5],
      ['pre-launch', 'info', 'B', '2024-01-01', '2024-01-10', null, 10, null],
      ['never-sold', 'info', 'C', '2024-01-01', '2024-01-20', null, 20, null],
    ]);
  });

  test('details carry the rate model', () => {
    const f = run.findings.find((x) => x.code === 'stockout')!;
    expect(f.details).toEqual({
      length: 5,
      mean: 3,
      variance: 0,
      p0: Math.exp(-3),
      k_star: 5,
      model: 'poisson',
    });
    expect(f.storeId).toBe('S1');
    expect(f.regionId).toBe('R1');
  });
});

describe('series-gaps', () => {
  test('missing days inside the span, not stored zeros', () => {
    expect(of('series-gaps')).toEqual([['series-gaps', 'warn', 'D', '2024-01-03', '2024-01-05', null, 4, 1]]);
    expect(run.findings.find((f) => f.check === 'series-gaps')!.details).toEqual({
      missing_days: 4,
      gaps: 2,
      longest: 3,
      span_days: 8,
      days: ['2024-01-03', '2024-01-04', '2024-01-05', '2024-01-07'],
      chain_days_excluded: 0,
    });
  });
});

describe('units-sanity', () => {
  test('negative runs block, a spike above modified z 10 is info', () => {
    expect(of('units-sanity')).toEqual([
      ['negative-units', 'block', 'E', '2024-01-02', '2024-01-03', null, -3, 0],
      ['negative-units', 'block', 'E', '2024-01-06', '2024-01-06', null, -1, 0],
      ['units-spike', 'info', 'F', '2024-01-29', '2024-01-29', null, 11, 10],
    ]);
  });
});

test('the run records every selected check with its counts', () => {
  expect(run.checks.map((c) => [c.check, c.status, c.blocking, c.warnings, c.infos])).toEqual([
    ['series-gaps', 'warned', 0, 1, 0],
    ['stockout-zeros', 'warned', 0, 1, 3],
    ['units-sanity', 'blocked', 2, 0, 1],
  ]);
  expect(run).toMatchObject({ status: 'blocked', blocking: 2, warnings: 2, infos: 4, waived: 0 });
});

test('a cutoff hides later days: the stock-out run becomes open', async () => {
  const { db, config } = t();
  const r = await runChecks(db, config, { only: ['stockout-zeros'], cutoff: '2024-01-17' });
  const a = r.findings.filter((f) => f.itemId === 'A').map(pick);
  // Up to 01-17 series A ends in 3 zeros: open, not yet past k* = 5, so no finding at all.
  expect(a).toEqual([]);
  const r2 = await runChecks(db, config, { only: ['stockout-zeros'], cutoff: '2024-01-19' });
  expect(r2.findings.filter((f) => f.itemId === 'A').map(pick)).toEqual([
    ['open-zero-run', 'info', 'A', '2024-01-15', '2024-01-19', '2024-01-19', 5, 5],
  ]);
});
