import { format, startOfWeek } from 'date-fns';
import fc from 'fast-check';
import { describe, expect, test } from 'vitest';
import { retailWeekStart } from '../../src/checks/run-checks.js';
import { soldWeekStarts, unpricedWeeks } from '../../src/checks/sold-weeks.js';
import { day, formatDay, toCivil } from '../../src/core/days.js';

describe('retailWeekStart', () => {
  test('ISO weeks (Monday start): 2000-01-02 is in the week of 1999-12-27 (REFERENCES.md 1, row 2)', () => {
    expect(formatDay(retailWeekStart(day('2000-01-02'), 1))).toBe('1999-12-27');
    // Row 11: W01 of 2013 is 2012-12-31 .. 2013-01-06.
    expect(formatDay(retailWeekStart(day('2013-01-06'), 1))).toBe('2012-12-31');
  });

  test('agrees with date-fns startOfWeek for every week start day', () => {
    fc.assert(
      fc.property(fc.integer({ min: -20000, max: 40000 }), fc.integer({ min: 0, max: 6 }), (d, ws) => {
        const { y, m, d: dd } = toCivil(d);
        const expected = format(startOfWeek(new Date(y, m - 1, dd), { weekStartsOn: ws as 0 }), 'yyyy-MM-dd');
        expect(formatDay(retailWeekStart(d, ws))).toBe(expected);
      }),
      { numRuns: 500 },
    );
  });
});

describe('sold weeks and their prices', () => {
  const sat = (d: number) => retailWeekStart(d, 6);
  test('weeks with units, merged with priced week starts', () => {
    const first = day('2024-01-06'); // a Saturday
    // Week 1 sold, week 2 all zero, week 3 sold but only a NaN and a 1, week 4 sold on its first day.
    const u = Float64Array.from([1, 0, 0, 0, 0, 0, 0, ...Array(7).fill(0), Number.NaN, 1, 0, 0, 0, 0, 0, 3]);
    const sold = soldWeekStarts(first, u, sat);
    expect([...sold]).toEqual([first, first + 14, first + 21]);
    const priced = Int32Array.from([first, first + 7]);
    expect(unpricedWeeks(sold, priced)).toEqual({
      sold: 3,
      unpriced: 2,
      firstUnpriced: first + 14,
      lastUnpriced: first + 21,
    });
    expect(unpricedWeeks(sold, undefined)).toMatchObject({ sold: 3, unpriced: 3 });
    expect(unpricedWeeks(new Int32Array(0), priced)).toEqual({
      sold: 0,
      unpriced: 0,
      firstUnpriced: -1,
      lastUnpriced: -1,
    });
  });

  test('a series starting mid-week belongs to the week that started before it', () => {
    const first = day('2024-01-10'); // Wednesday; its week starts Saturday 2024-01-06
    const sold = soldWeekStarts(first, Float64Array.from([2]), sat);
    expect([...sold]).toEqual([day('2024-01-06')]);
    expect(unpricedWeeks(sold, Int32Array.from([day('2024-01-06')]))).toMatchObject({ sold: 1, unpriced: 0 });
  });
});
