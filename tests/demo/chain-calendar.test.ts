import { getISODay, lastDayOfMonth } from 'date-fns';
import { describe, expect, test } from 'vitest';
import { formatDay, fromCivil, parseDay } from '../../src/core/days.js';
import {
  benefitFlags,
  EVENTS,
  eventLifts,
  eventOccurrences,
  nthWeekday,
  firstLightSunday,
} from '../../src/demo/chain-calendar.js';

describe('firstLightSunday (Gregorian Easter Sunday)', () => {
  test.each([
    ['1818-03-22', 'SRC Meeus, Astronomical Formulae for Calculators ch. 4 (earliest possible)'],
    ['1886-04-25', 'SRC Meeus ch. 4 (latest possible)'],
    ['1943-04-25', 'SRC Meeus ch. 4'],
    ['2000-04-23', 'MEM Meeus, Astronomical Algorithms ch. 8'],
    ['2005-03-27', 'SRC HP-41 EASTR1 example'],
    ['2008-03-23', 'LIB python-dateutil easter()'],
    ['2011-04-24', 'LIB python-dateutil easter()'],
    ['2016-03-27', 'SRC date-easter README'],
    ['2020-04-12', 'SRC @pacote/computus docs'],
    ['2024-03-31', 'LIB python-dateutil easter()'],
    ['2038-04-25', 'SRC Meeus ch. 4'],
    ['2285-03-22', 'SRC Meeus ch. 4'],
  ])('%s (%s, via REFERENCES.md §2)', (iso) => {
    expect(formatDay(firstLightSunday(Number(iso.slice(0, 4))))).toBe(iso);
  });
});

describe('nthWeekday', () => {
  // Reference: date-fns, by walking the days of each month.
  const byDateFns = (y: number, m: number, weekday: number, n: number) => {
    const days: Date[] = [];
    const last = lastDayOfMonth(new Date(y, m - 1, 15)).getDate();
    for (let dom = 1; dom <= last; dom++) {
      const d = new Date(y, m - 1, dom);
      if (getISODay(d) === weekday) days.push(d);
    }
    const hit = n > 0 ? days[n - 1] : days[days.length - 1];
    return hit ? fromCivil(hit.getFullYear(), hit.getMonth() + 1, hit.getDate()) : Number.NaN;
  };

  test('agrees with date-fns for every rule of 1990-2040', () => {
    for (let y = 1990; y <= 2040; y++) {
      for (let m = 1; m <= 12; m++) {
        for (const wd of [1, 6, 7]) {
          for (const n of [1, 2, 3, -1]) expect(nthWeekday(y, m, wd, n)).toBe(byDateFns(y, m, wd, n));
        }
      }
    }
  });
});

describe('events and benefit days', () => {
  test('occurrences are sorted, within the span, and some days carry several events', () => {
    const first = parseDay('2022-01-01') as number;
    const last = parseDay('2024-12-31') as number;
    const occ = eventOccurrences(first, last);
    expect(occ.length).toBe(EVENTS.length * 3);
    for (let i = 1; i < occ.length; i++) expect(occ[i]!.day >= occ[i - 1]!.day).toBe(true);
    const june21 = occ.filter((e) => formatDay(e.day) === '2023-06-21').map((e) => e.name);
    expect(june21.sort()).toEqual(['Longest Day Run', 'Midsummer Bonfire']);
    expect(occ.find((e) => e.name === 'First Light Sunday' && formatDay(e.day).startsWith('2024'))?.day).toBe(
      parseDay('2024-03-31'),
    );
  });

  test('lifts multiply on shared days and reach run-up days before the event', () => {
    const first = parseDay('2023-06-01') as number;
    const [fresh, drinks] = eventLifts(first, 30, ['fresh', 'drinks']) as [Float64Array, Float64Array];
    const at = (d: string) => (parseDay(d) as number) - first;
    expect(drinks[at('2023-06-21')]).toBeCloseTo(1.4 * 1.15, 12);
    expect(drinks[at('2023-06-20')]).toBeCloseTo(1.3, 12);
    expect(fresh[at('2023-06-14')]).toBeCloseTo(1.15, 12);
    expect(fresh[at('2023-06-02')]).toBe(1);
    // Midwinter Day on 25 Dec lifts 22-24 Dec even when the span starts on the 23rd.
    const dec = parseDay('2023-12-23') as number;
    const [f2] = eventLifts(dec, 5, ['fresh']) as [Float64Array];
    expect(Array.from(f2)).toEqual([1.6, 1.6, 0.7, 1, 1]);
  });

  test('benefit windows are 10 days a month, shifted per region', () => {
    const first = parseDay('2024-02-01') as number;
    const r0 = benefitFlags(0, first, 29);
    const r1 = benefitFlags(1, first, 29);
    expect(r0.reduce((a, b) => a + b, 0)).toBe(10);
    expect(r0[0]).toBe(1);
    expect(r0[10]).toBe(0);
    expect(r1[4]).toBe(0);
    expect(r1[5]).toBe(1);
    expect(r1[14]).toBe(1);
    expect(r1[15]).toBe(0);
  });
});
