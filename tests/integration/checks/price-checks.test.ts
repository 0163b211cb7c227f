import { beforeAll, describe, expect, test } from 'vitest';
import type { Finding } from '../../../src/checks/finding.js';
import { parseConfig } from '../../../src/config/config.js';
import { type CheckRunResult, runChecks } from '../../../src/checks/run-checks.js';
import { useTestDb } from '../../helpers/db.js';
import { addCalendar, addItems, addPrices, addSeries, addStores, clearTables } from './fixture.js';

const t = useTestDb(import.meta.url);
const rep = (v: number, n: number) => Array.from({ length: n }, () => v);
const sorted = (rows: unknown[][]) => rows.map((r) => JSON.stringify(r)).sort();

let run: CheckRunResult;
const of = (check: string, pick: (f: Finding) => unknown[]) =>
  sorted(run.findings.filter((f) => f.check === check).map(pick));

beforeAll(async () => {
  const { db, config } = t();
  await clearTables(db);
  await addItems(
    db,
    ['P1', 'P2', 'P3', 'P4', 'P5', 'P6'].map((i) => [i, 'D1', 'C1'] as [string, string, string]),
  );
  await addStores(db, [
    ['S1', 'R1'],
    ['S2', 'R1'],
  ]);
  await addCalendar(db, '2024-01-01', '2024-06-30');
  // Retail weeks start on Saturday (the default); 2024-01-06 is a Saturday.
  // P1: the Iglewicz-Hoaglin worked example (REFERENCES.md 3.6) as 11 weekly prices. Week 10
  // (18, 2024-03-09) against weeks 1-9: median 12, MAD 1 -> M = 0.6745 x 6 = 4.047 > 3.5;
  // week 11 (40, 2024-03-16) against weeks 1-10: median 12, MAD 1 -> 18.886; week 9 (17) -> 3.3725.
  await addPrices(db, 'P1', 'S1', '2024-01-06', [10, 11, 11, 12, 12, 12, 13, 13, 17, 18, 40]);
  // Sold every day of 12 weeks: week 12 (2024-03-23) has no price.
  await addSeries(db, 'P1', 'S1', '2024-01-06', rep(1, 84));
  // P2: MAD 0 after 13 weeks at 2.99, so the ratio rule: 8.99 (3.007x) and 0.99 (0.331x) flag,
  // 1.00 (0.334x) does not.
  await addPrices(db, 'P2', 'S1', '2024-01-06', [...rep(2.99, 13), 8.99, 0.99, 1.0]);
  // P3: a one-week history: 3.5x the single earlier price (ratio rule below four weeks).
  await addPrices(db, 'P3', 'S1', '2024-01-06', [1.0, 3.5]);
  // P4: a zero price blocks.
  await addPrices(db, 'P4', 'S1', '2024-01-06', [1.0, 0, 1.0]);
  // P5: a row dated Monday 2024-01-08, not a Saturday.
  await db.query(
    `INSERT INTO prices VALUES ('P5', 'S1', '2024-01-08', 1.5), ('P5', 'S1', '2024-01-13', 1.5)`,
  );
  // P6 in store S2: 4 sold weeks, no price at all.
  await addSeries(db, 'P6', 'S2', '2024-01-06', rep(2, 28));
  // The plain Iglewicz-Hoaglin rule (no MAD floor), so the worked example's values come out.
  const plain = parseConfig(
    { database: config.database, checks: { 'price-spikes': { minRelativeMad: 0 } } },
    'test',
  );
  run = await runChecks(db, plain, { only: ['price-spikes', 'price-coverage'] });
});

describe('price-spikes', () => {
  test('exact findings', () => {
    const pick = (f: Finding) => [
      f.code,
      f.severity,
      f.itemId,
      f.storeId,
      f.weekStart,
      f.observed === null ? null : Number(f.observed.toFixed(4)),
      f.threshold,
    ];
    expect(of('price-spikes', pick)).toEqual(
      sorted([
        ['price-spike', 'warn', 'P1', 'S1', '2024-03-09', 4.047, 3.5],
        ['price-spike', 'warn', 'P1', 'S1', '2024-03-16', 18.886, 3.5],
        ['price-spike', 'warn', 'P2', 'S1', '2024-04-06', Number((8.99 / 2.99).toFixed(4)), 3],
        ['price-spike', 'warn', 'P2', 'S1', '2024-04-13', Number((0.99 / 2.99).toFixed(4)), 3],
        ['price-spike', 'warn', 'P3', 'S1', '2024-01-13', 3.5, 3],
        ['non-positive-price', 'block', 'P4', 'S1', '2024-01-13', 0, 0],
        ['week-misaligned', 'block', 'P5', 'S1', null, 1, 0],
        ['missing-price', 'warn', 'P1', 'S1', null, 1, 0],
        ['missing-price', 'warn', 'P6', 'S2', null, 4, 0],
      ]),
    );
  });

  test('spike details name the baseline', () => {
    const f = run.findings.find((x) => x.code === 'price-spike' && x.weekStart === '2024-03-16')!;
    expect(f.details).toEqual({ price: 40, median: 12, mad: 1, ratio: 40 / 12, history_weeks: 10 });
    expect(f.seriesId).not.toBeNull();
    const p3 = run.findings.find((x) => x.code === 'price-spike' && x.itemId === 'P3')!;
    expect(p3.details).toMatchObject({ history_weeks: 1, mad: 0 });
    expect(p3.seriesId).toBeNull(); // prices without any sales
  });

  test('with the default MAD floor (10% of the median) the worked example keeps only 40', async () => {
    const { db, config } = t();
    const r = await runChecks(db, config, { only: ['price-spikes'] });
    const p1 = r.findings.filter((f) => f.code === 'price-spike' && f.itemId === 'P1');
    // Week 11: 0.6745 x 28 / max(1, 0.1 x 12) = 15.74; week 10: 0.6745 x 6 / 1.2 = 3.37 < 3.5.
    expect(p1.map((f) => [f.weekStart, Number(f.observed!.toFixed(4))])).toEqual([['2024-03-16', 15.7383]]);
  });

  test('missing prices: first and last unpriced sold week', () => {
    const f = run.findings.find((x) => x.code === 'missing-price' && x.itemId === 'P6')!;
    expect([f.firstDay, f.lastDay]).toEqual(['2024-01-06', '2024-02-02']);
    expect(f.details).toEqual({ weeks: 4, sold_weeks: 4 });
  });
});

describe('price-coverage', () => {
  test('chain and store shares of sold series-weeks without a price', () => {
    // Sold series-weeks: P1 12 (1 unpriced), P6 4 (4 unpriced) -> 5 / 16 = 31.25% chain-wide;
    // S1 1 / 12 = 8.3% and S2 4 / 4 = 100%, both above 5%.
    const got = run.findings
      .filter((f) => f.check === 'price-coverage')
      .map((f) => [f.storeId, f.observed, f.threshold, f.details])
      .sort((a, b) => (a[0] === null ? -1 : b[0] === null ? 1 : String(a[0]) < String(b[0]) ? -1 : 1));
    expect(got).toEqual([
      [null, 5 / 16, 0.05, { unpriced_weeks: 5, sold_weeks: 16, scope: 'chain' }],
      ['S1', 1 / 12, 0.05, { unpriced_weeks: 1, sold_weeks: 12, scope: 'store' }],
      ['S2', 1, 0.05, { unpriced_weeks: 4, sold_weeks: 4, scope: 'store' }],
    ]);
  });

  test('a looser threshold keeps only the worse store', async () => {
    const { db, config } = t();
    const loose = parseConfig(
      { database: config.database, checks: { 'price-coverage': { maxUnpricedShare: 0.5 } } },
      'test',
    );
    const r = await runChecks(db, loose, { only: ['price-coverage'] });
    expect(r.findings.map((f) => f.storeId)).toEqual(['S2']);
  });
});
