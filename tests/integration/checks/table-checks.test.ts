import { beforeAll, describe, expect, test } from 'vitest';
import type { Finding } from '../../../src/checks/finding.js';
import { type CheckRunResult, runChecks } from '../../../src/checks/run-checks.js';
import { useTestDb } from '../../helpers/db.js';
import { addCalendar, addItems, addPrices, addSeries, addStores, clearTables } from './fixture.js';

const t = useTestDb(import.meta.url);
const rep = (v: number, n: number) => Array.from({ length: n }, () => v);
const sortKey = (f: Finding) => JSON.stringify([f.code, f.itemId, f.storeId, f.regionId, f.firstDay]);
const byKey = (a: Finding, b: Finding) => (sortKey(a) < sortKey(b) ? -1 : 1);

let run: CheckRunResult;
const of = (check: string) => run.findings.filter((f) => f.check === check).sort(byKey);

beforeAll(async () => {
  const { db, config } = t();
  await clearTables(db);
  await addItems(db, [
    ['A', 'D1', 'C1'],
    ['B', 'D1', null],
    ['C', null, 'C1'],
  ]);
  await addStores(db, [
    ['S1', 'R1'],
    ['S2', null],
    ['S3', ' '],
  ]);
  // Calendar January 2024 without the 10th and 11th; sales run to 2024-02-02.
  await addCalendar(db, '2024-01-01', '2024-01-31');
  await db.query(`DELETE FROM calendar_days WHERE day IN ('2024-01-10', '2024-01-11')`);
  await addSeries(db, 'A', 'S1', '2024-01-01', rep(1, 33));
  await addSeries(db, 'X', 'S1', '2024-01-01', rep(1, 3)); // unknown item
  await addSeries(db, 'X', 'S4', '2024-01-01', rep(1, 3)); // unknown item and store
  await addSeries(db, 'A', 'S4', '2024-01-01', rep(1, 3)); // unknown store
  await addPrices(db, 'Y', 'S1', '2024-01-06', [1, 1, 1]); // unknown item, 3 rows
  await addPrices(db, 'A', 'S9', '2024-01-06', [1, 1]); // unknown store, 2 rows
  await db.query(`INSERT INTO events VALUES ('2024-01-05', 'E1', 'cultural'), ('2024-01-10', 'Fest', 'cultural'),
    ('2024-01-10', 'Game', 'sporting'), ('2024-03-01', 'Late', 'national')`);
  await db.query(
    `INSERT INTO benefit_days VALUES ('R1', '2024-01-05'), ('R1', '2024-01-11'), ('R9', '2024-01-05'), ('R9', '2024-01-06')`,
  );

  // Load batches: 1 prices (superseded by the full replace 2), 3 sales with an in-file duplicate,
  // 4 sales rolled back (nothing stored), each with rejects.
  await db.query(`INSERT INTO load_batches (batch_id, target, file, mode, status) VALUES
    (1, 'prices', 'prices-old.csv', 'append', 'loaded'), (2, 'prices', 'prices.csv', 'replace', 'loaded'),
    (3, 'sales', 'sales.csv', 'append', 'loaded'), (4, 'sales', 'sales-bad.csv', 'append', 'rejected')`);
  await db.query(`INSERT INTO rejected_rows (batch_id, file, line, other_line, reason, raw, key) VALUES
    (1, 'prices-old.csv', 5, 2, 'duplicate key', 'A,S1,2024-01-06,1', '["A","S1","2024-01-06"]'),
    (3, 'sales.csv', 7, 3, 'duplicate key', 'A,S1,2024-01-02,1', '["A","S1","2024-01-02"]'),
    (3, 'sales.csv', 9, NULL, 'units 1.5 is not an integer', 'A,S1,2024-01-03,1.5', '["A","S1","2024-01-03"]'),
    (4, 'sales-bad.csv', 4, 2, 'duplicate key', 'A,S1,2024-01-04,1', '["A","S1","2024-01-04"]')`);
  // events without its key constraint, holding one key twice.
  await db.exec(`ALTER TABLE events DROP CONSTRAINT events_pkey;
    INSERT INTO events VALUES ('2024-01-05', 'E1', 'cultural');`);
  run = await runChecks(db, config, { only: ['duplicate-keys', 'unknown-references', 'calendar-coverage'] });
});

describe('duplicate-keys', () => {
  test('the loader duplicate with both lines, and a duplicate in a table without its key', () => {
    expect(
      of('duplicate-keys').map((f) => [
        f.code,
        f.severity,
        f.itemId,
        f.storeId,
        f.firstDay,
        f.observed,
        f.message,
      ]),
    ).toEqual([
      [
        'duplicate-key',
        'block',
        null,
        null,
        '2024-01-05',
        2,
        'events holds 2 rows with key {"day": "2024-01-05", "name": "E1"}',
      ],
      [
        'duplicate-row',
        'block',
        'A',
        'S1',
        '2024-01-02',
        2,
        'sales.csv line 7 repeats the key ["A","S1","2024-01-02"] of line 3 (batch 3)',
      ],
    ]);
    const dup = of('duplicate-keys').find((f) => f.code === 'duplicate-row')!;
    expect(dup.details).toEqual({
      file: 'sales.csv',
      line: 7,
      other_line: 3,
      key: '["A","S1","2024-01-02"]',
      batch_id: 3,
    });
  });
});

describe('unknown-references', () => {
  test('exact findings', () => {
    expect(
      of('unknown-references').map((f) => [
        f.code,
        f.severity,
        f.itemId,
        f.storeId,
        f.regionId,
        f.observed,
        f.details,
      ]),
    ).toEqual([
      ['item-without-category', 'block', 'B', null, null, null, {}],
      ['item-without-dept', 'block', 'C', null, null, null, {}],
      ['store-without-region', 'block', null, 'S2', null, null, {}],
      ['store-without-region', 'block', null, 'S3', null, null, {}],
      ['unknown-item', 'block', 'X', null, null, 2, { table: 'sales', series: 2, rows: null }],
      ['unknown-item', 'block', 'Y', null, null, 3, { table: 'prices', series: null, rows: 3 }],
      ['unknown-region', 'warn', null, null, 'R9', 2, { table: 'benefit_days', series: null, rows: 2 }],
      ['unknown-store', 'block', null, 'S4', null, 2, { table: 'sales', series: 2, rows: null }],
      ['unknown-store', 'block', null, 'S9', null, 2, { table: 'prices', series: null, rows: 2 }],
    ]);
  });
});

describe('calendar-coverage', () => {
  test('missing calendar days inside the sales span, events and benefit days outside the calendar', () => {
    expect(
      of('calendar-coverage').map((f) => [f.code, f.firstDay, f.lastDay, f.observed, f.details]),
    ).toEqual([
      ['benefit-day-outside-calendar', '2024-01-11', '2024-01-11', 1, { regions: ['R1'] }],
      ['calendar-missing-days', '2024-01-10', '2024-01-11', 2, { days: 2 }],
      ['calendar-missing-days', '2024-02-01', '2024-02-02', 2, { days: 2 }],
      ['event-outside-calendar', '2024-01-10', '2024-01-10', 1, { names: ['Fest', 'Game'] }],
      ['event-outside-calendar', '2024-03-01', '2024-03-01', 1, { names: ['Late'] }],
    ]);
    expect(of('calendar-coverage').every((f) => f.severity === 'block')).toBe(true);
  });
});
