import { z } from 'zod';
import { fromCivil, isoWeekday, toCivil } from '../core/days.js';
import { type CalendarTable, defineFamily, type FeatureColumn, NO_NEEDS } from './family.js';

export const CALENDAR_FEATURES = [
  'day_of_week',
  'day_of_month',
  'iso_week',
  'iso_year',
  'month',
  'quarter',
  'year',
  'is_weekend',
  'event_name',
  'event_kind',
  'event_count',
  'benefit_day',
  'days_ahead',
] as const;
export type CalendarFeature = (typeof CALENDAR_FEATURES)[number];

const DESCRIPTIONS: Record<CalendarFeature, string> = {
  day_of_week: 'ISO 8601 weekday of the target day (1 = Monday ... 7 = Sunday)',
  day_of_month: 'day of the month of the target day',
  iso_week: 'ISO 8601 week number of the target day (1-53)',
  iso_year: 'ISO 8601 week-numbering year of the target day',
  month: 'month of the target day (1-12)',
  quarter: 'quarter of the target day (1-4)',
  year: 'calendar year of the target day',
  is_weekend: '1 on Saturday and Sunday, else 0',
  event_name: 'code of the first event (by name) on the target day, 0 for none (codes in the catalogue)',
  event_kind: "code of that event's kind, 0 for none (codes in the catalogue)",
  event_count: 'number of events on the target day',
  benefit_day: "1 when the target day is a benefit day in the store's region, else 0",
  days_ahead: 'days from the origin to the target day (origin mode)',
};

/** An event kind's column suffix: lower case, runs of other characters as `_`. */
export function kindSlug(kind: string): string {
  return kind
    .toLowerCase()
    .replace(/[^a-z0-9]+/g, '_')
    .replace(/^_+|_+$/g, '');
}

export const calendarParamsSchema = z
  .object({
    /** Which of the per-day values to emit; default all (days_ahead only in origin mode). */
    features: z.array(z.enum(CALENDAR_FEATURES)).optional(),
    /** Event kinds (as in the events table) that get days_to_<kind> and days_since_<kind>. */
    eventKinds: z.array(z.string().min(1).max(64)).default([]),
  })
  .strict();
export type CalendarParams = z.infer<typeof calendarParamsSchema>;

/** The base features a set emits for these params and mode. */
export function calendarFeatures(p: CalendarParams, mode: 'shift' | 'origin'): CalendarFeature[] {
  return p.features ?? CALENDAR_FEATURES.filter((f) => f !== 'days_ahead' || mode === 'origin');
}

/** ISO 8601 week date of an epoch day: week-numbering year, week 1-53, weekday 1-7. */
export function isoWeekDate(day: number): { year: number; week: number; weekday: number } {
  const weekday = isoWeekday(day);
  // The week belongs to the year of its Thursday; week 1 holds the year's first Thursday.
  const thursday = day - weekday + 4;
  const year = toCivil(thursday).y;
  const jan1 = fromCivil(year, 1, 1);
  return { year, week: Math.floor((thursday - jan1) / 7) + 1, weekday };
}

export interface CalendarEvent {
  readonly day: number;
  readonly name: string;
  readonly kind: string;
}

/** Code dictionaries: code = 1-based position in the sorted distinct names / kinds. */
export interface CalendarCodes {
  readonly eventNames: readonly string[];
  readonly eventKinds: readonly string[];
}

export function calendarCodes(events: readonly CalendarEvent[]): CalendarCodes {
  const sorted = (xs: Iterable<string>) => [...new Set(xs)].sort((a, b) => (a < b ? -1 : a > b ? 1 : 0));
  return { eventNames: sorted(events.map((e) => e.name)), eventKinds: sorted(events.map((e) => e.kind)) };
}

/**
 * Per-day calendar values for days lo..hi (all known ahead: DESIGN.md rule 3). `benefitDays`
 * are the benefit days of the store's region. Days to the next / since the last event of a
 * kind count from the target day itself (0 on an event day) and are NaN when the events table
 * has no such event on that side.
 */
export function calendarTable(
  lo: number,
  hi: number,
  events: readonly CalendarEvent[],
  benefitDays: ReadonlySet<number>,
  codes: CalendarCodes,
  kinds: readonly string[],
): CalendarTable {
  const n = Math.max(0, hi - lo + 1);
  const col = () => new Float64Array(n);
  const c = {
    day_of_week: col(),
    day_of_month: col(),
    iso_week: col(),
    iso_year: col(),
    month: col(),
    quarter: col(),
    year: col(),
    is_weekend: col(),
    event_name: col(),
    event_kind: col(),
    event_count: col(),
    benefit_day: col(),
  };
  const nameCode = new Map(codes.eventNames.map((s, i) => [s, i + 1]));
  const kindCode = new Map(codes.eventKinds.map((s, i) => [s, i + 1]));
  const byDay = new Map<number, CalendarEvent[]>();
  for (const e of events) {
    const list = byDay.get(e.day);
    if (list) list.push(e);
    else byDay.set(e.day, [e]);
  }
  for (let i = 0; i < n; i++) {
    const d = lo + i;
    const { y, m, d: dom } = toCivil(d);
    const iso = isoWeekDate(d);
    c.day_of_week[i] = iso.weekday;
    c.day_of_month[i] = dom;
    c.iso_week[i] = iso.week;
    c.iso_year[i] = iso.year;
    c.month[i] = m;
    c.quarter[i] = Math.floor((m - 1) / 3) + 1;
    c.year[i] = y;
    c.is_weekend[i] = iso.weekday >= 6 ? 1 : 0;
    const todays = byDay.get(d);
    if (todays) {
      const first = todays.reduce((a, b) => (b.name < a.name ? b : a));
      c.event_name[i] = nameCode.get(first.name)!;
      c.event_kind[i] = kindCode.get(first.kind)!;
      c.event_count[i] = todays.length;
    }
    c.benefit_day[i] = benefitDays.has(d) ? 1 : 0;
  }
  const columns = new Map<string, Float64Array>(Object.entries(c));
  for (const kind of kinds) {
    const days = [...new Set(events.filter((e) => e.kind === kind).map((e) => e.day))].sort((a, b) => a - b);
    const until = col();
    const since = col();
    let j = 0;
    for (let i = 0; i < n; i++) {
      const d = lo + i;
      while (j < days.length && days[j]! < d) j++;
      until[i] = j < days.length ? days[j]! - d : Number.NaN;
      const last = j < days.length && days[j] === d ? d : j > 0 ? days[j - 1]! : Number.NaN;
      since[i] = d - last;
    }
    columns.set(`days_to_${kindSlug(kind)}`, until);
    columns.set(`days_since_${kindSlug(kind)}`, since);
  }
  return { base: lo, columns };
}

/** Columns of the calendar family for these params. */
export function calendarColumns(
  p: CalendarParams,
  set: { readonly mode: 'shift' | 'origin' },
): FeatureColumn[] {
  const base = calendarFeatures(p, set.mode).map(
    (f): FeatureColumn => ({
      name: f,
      family: 'calendar',
      description: DESCRIPTIONS[f],
      source: 'calendar',
      shift: 0,
    }),
  );
  const perKind = p.eventKinds.flatMap((k): FeatureColumn[] => [
    {
      name: `days_to_${kindSlug(k)}`,
      family: 'calendar',
      description: `days from the target day to the next event of kind '${k}' (0 on the day)`,
      source: 'calendar',
      shift: 0,
    },
    {
      name: `days_since_${kindSlug(k)}`,
      family: 'calendar',
      description: `days since the last event of kind '${k}' up to the target day (0 on the day)`,
      source: 'calendar',
      shift: 0,
    },
  ]);
  return [...base, ...perKind];
}

/** Calendar of the target day t: weekday, ISO week and year, events, benefit days (rule 3). */
export const calendar = defineFamily<CalendarParams>({
  name: 'calendar',
  params: calendarParamsSchema,
  columns: calendarColumns,
  needs() {
    return { ...NO_NEEDS, calendar: true };
  },
  compute(p, set, s, env, out) {
    const table = env.calendar;
    if (!table) throw new Error('calendar table not prepared');
    const key = `calendar-columns\u001f${set.mode}`;
    let names = env.cache.get(key) as string[] | undefined;
    if (!names) {
      names = calendarColumns(p, set).map((c) => c.name);
      env.cache.set(key, names);
    }
    const { rows } = s;
    for (let c = 0; c < names.length; c++) {
      const col = out[c]!;
      const name = names[c]!;
      if (name === 'days_ahead') {
        for (let r = 0; r < rows.n; r++) col[r] = rows.day[r]! - rows.limit[r]!;
        continue;
      }
      const src = table.columns.get(name);
      if (!src) throw new Error(`calendar column ${name} not prepared`);
      const day = rows.day;
      const base = table.base;
      const len = src.length;
      for (let r = 0; r < rows.n; r++) {
        const i = day[r]! - base;
        col[r] = i >= 0 && i < len ? src[i]! : Number.NaN;
      }
    }
  },
});
