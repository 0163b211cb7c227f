import { fromCivil, isoWeekday, toCivil } from '../core/days.js';

/**
 * The demo chain's calendar: invented events (several may share a day) with their demand lifts
 * per department, and benefit days per region. Pure: days in, arrays out.
 */

export type EventKind = 'holiday' | 'sporting' | 'cultural' | 'religious';

type Rule =
  | { readonly fixed: readonly [month: number, day: number] }
  | { readonly nth: readonly [month: number, weekday: number, n: number] } // n = -1: last
  | { readonly firstLight: true };

export interface EventDef {
  readonly name: string;
  readonly kind: EventKind;
  readonly rule: Rule;
  /** Multipliers per department on the day itself; `all` applies to departments not named. */
  readonly onDay: Readonly<Record<string, number>>;
  /** Days before the event with a run-up lift, and those multipliers. */
  readonly lead?: number;
  readonly before?: Readonly<Record<string, number>>;
}

export const EVENTS: readonly EventDef[] = [
  { name: 'New Year', kind: 'holiday', rule: { fixed: [1, 1] }, onDay: { all: 0.8 } },
  {
    name: 'First Light Sunday',
    kind: 'religious',
    rule: { firstLight: true },
    lead: 2,
    before: { fresh: 1.4, drinks: 1.2 },
    onDay: { all: 0.85 },
  },
  { name: "Saint Brannock's Day", kind: 'religious', rule: { fixed: [3, 9] }, onDay: { drinks: 1.35 } },
  { name: 'Blossom Parade', kind: 'cultural', rule: { nth: [4, 6, 3] }, onDay: { fresh: 1.1, drinks: 1.1 } },
  {
    name: 'Valley Cup Final',
    kind: 'sporting',
    rule: { nth: [5, 6, -1] },
    onDay: { drinks: 1.5, pantry: 1.2 },
  },
  { name: 'Founders Day', kind: 'holiday', rule: { fixed: [6, 14] }, onDay: { drinks: 1.3, fresh: 1.15 } },
  {
    name: 'Midsummer Bonfire',
    kind: 'cultural',
    rule: { fixed: [6, 21] },
    lead: 1,
    before: { drinks: 1.3 },
    onDay: { drinks: 1.4, fresh: 1.15 },
  },
  { name: 'Longest Day Run', kind: 'sporting', rule: { fixed: [6, 21] }, onDay: { drinks: 1.15 } },
  { name: 'Harbour Regatta', kind: 'sporting', rule: { nth: [8, 7, 1] }, onDay: { drinks: 1.25 } },
  { name: 'Kite Festival', kind: 'cultural', rule: { nth: [9, 7, 2] }, onDay: { drinks: 1.15, pantry: 1.1 } },
  {
    name: 'Harvest Thanksgiving',
    kind: 'religious',
    rule: { nth: [10, 7, 2] },
    lead: 2,
    before: { fresh: 1.35, pantry: 1.15 },
    onDay: { all: 0.9 },
  },
  { name: 'Lamplight Eve', kind: 'cultural', rule: { nth: [11, 6, 1] }, onDay: { drinks: 1.2, frozen: 1.1 } },
  {
    name: 'Midwinter Day',
    kind: 'religious',
    rule: { fixed: [12, 25] },
    lead: 3,
    before: { fresh: 1.6, pantry: 1.3, drinks: 1.5, frozen: 1.2 },
    onDay: { all: 0.7 },
  },
  {
    name: "Year's End",
    kind: 'holiday',
    rule: { fixed: [12, 31] },
    onDay: { drinks: 1.6, fresh: 1.3, pantry: 1.2 },
  },
];

/**
 * First Light Sunday falls on Gregorian Easter Sunday: the anonymous Gregorian computus
 * (Meeus/Jones/Butcher), valid for every Gregorian year. Returns an epoch day.
 */
export function firstLightSunday(year: number): number {
  const a = year % 19;
  const b = Math.floor(year / 100);
  const c = year % 100;
  const d = Math.floor(b / 4);
  const e = b % 4;
  const f = Math.floor((b + 8) / 25);
  const g = Math.floor((b - f + 1) / 3);
  const h = (19 * a + b - d - g + 15) % 30;
  const i = Math.floor(c / 4);
  const k = c % 4;
  const l = (32 + 2 * e + 2 * i - h - k) % 7;
  const m = Math.floor((a + 11 * h + 22 * l) / 451);
  const month = Math.floor((h + l - 7 * m + 114) / 31);
  const day = ((h + l - 7 * m + 114) % 31) + 1;
  return fromCivil(year, month, day);
}

/** The `n`th ISO weekday (1 = Monday) of a month; n = -1 for the last one. */
export function nthWeekday(year: number, month: number, weekday: number, n: number): number {
  if (n > 0) {
    const first = fromCivil(year, month, 1);
    return first + ((weekday - isoWeekday(first) + 7) % 7) + 7 * (n - 1);
  }
  const last = fromCivil(month === 12 ? year + 1 : year, month === 12 ? 1 : month + 1, 1) - 1;
  return last - ((isoWeekday(last) - weekday + 7) % 7);
}

function eventDay(def: EventDef, year: number): number {
  const r = def.rule;
  if ('fixed' in r) return fromCivil(year, r.fixed[0], r.fixed[1]);
  if ('nth' in r) return nthWeekday(year, r.nth[0], r.nth[1], r.nth[2]);
  return firstLightSunday(year);
}

export interface EventOccurrence {
  readonly day: number;
  readonly name: string;
  readonly kind: EventKind;
}

/** Every event in [first, last] (epoch days), ordered by day then name. */
export function eventOccurrences(first: number, last: number): EventOccurrence[] {
  const out: EventOccurrence[] = [];
  for (let y = toCivil(first).y; y <= toCivil(last).y; y++) {
    for (const def of EVENTS) {
      const day = eventDay(def, y);
      if (day >= first && day <= last) out.push({ day, name: def.name, kind: def.kind });
    }
  }
  return out.sort((a, b) => a.day - b.day || (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));
}

/**
 * Event multipliers per department and day for the `n` days from `first`: one Float64Array per
 * department (index = day offset). Overlapping events multiply; events just outside the span
 * still lift their run-up days inside it.
 */
export function eventLifts(first: number, n: number, departments: readonly string[]): Float64Array[] {
  const lifts = departments.map(() => new Float64Array(n).fill(1));
  const apply = (offset: number, table: Readonly<Record<string, number>>) => {
    if (offset < 0 || offset >= n) return;
    departments.forEach((dept, i) => {
      const m = table[dept] ?? table.all ?? 1;
      (lifts[i] as Float64Array)[offset]! *= m;
    });
  };
  for (let y = toCivil(first).y; y <= toCivil(first + n + 7).y; y++) {
    for (const def of EVENTS) {
      const off = eventDay(def, y) - first;
      apply(off, def.onDay);
      for (let j = 1; j <= (def.lead ?? 0); j++) apply(off - j, def.before ?? {});
    }
  }
  return lifts;
}

/** Days of the month on which benefit payments arrive and are spent in region `r`: a 10-day window. */
export function benefitWindow(regionIndex: number): readonly [number, number] {
  const startDom = 1 + 5 * (regionIndex % 4);
  return [startDom, startDom + 9];
}

/** Benefit-day flags (1/0) for region `r` over the `n` days from `first`. */
export function benefitFlags(regionIndex: number, first: number, n: number): Uint8Array {
  const [lo, hi] = benefitWindow(regionIndex);
  const flags = new Uint8Array(n);
  for (let i = 0; i < n; i++) {
    const dom = toCivil(first + i).d;
    if (dom >= lo && dom <= hi) flags[i] = 1;
  }
  return flags;
}
