import type { z } from 'zod';
import { formatDay } from '../core/days.js';
import { checkParams, defineCheck } from './check-definition.js';

export const calendarCoverageParams = checkParams(
  ['calendar-missing-days', 'event-outside-calendar', 'benefit-day-outside-calendar'],
  {},
);
export type CalendarCoverageParams = z.output<typeof calendarCoverageParams>;

/** Groups the days of `daysSql` (a query with a `day` column plus `extra`) into consecutive ranges. */
function rangesSql(daysSql: string, extra: string): string {
  return `SELECT min(day) AS first_day, max(day) AS last_day, count(DISTINCT day)::int AS days, ${extra}
    FROM (SELECT *, day - (dense_rank() OVER (ORDER BY day))::int AS grp FROM (${daysSql}) d) r
    GROUP BY grp ORDER BY 1`;
}

const COLUMNS = ['first_day', 'last_day', 'observed', 'threshold', 'rank', 'message', 'details'] as const;

/** Every day between the first and last sales day is in calendar_days; events and benefit days fall inside it. */
export const calendarCoverage = defineCheck({
  name: 'calendar-coverage',
  description:
    'days between the first and last sales day missing from the calendar; events or benefit days outside it',
  codes: {
    'calendar-missing-days': { severity: 'block', meaning: 'days with sales span but no calendar row' },
    'event-outside-calendar': { severity: 'block', meaning: 'events on days the calendar does not have' },
    'benefit-day-outside-calendar': {
      severity: 'block',
      meaning: 'benefit days on days the calendar does not have',
    },
  },
  params: calendarCoverageParams,
  reads: ['sales'],
  async run(_db, ctx) {
    const pass = await ctx.sales();
    if (pass.firstDay !== null && pass.lastDay !== null) {
      const missing = rangesSql(
        `SELECT g::date AS day FROM generate_series($1::date, $2::date, interval '1 day') g
         EXCEPT SELECT day FROM calendar_days`,
        'NULL::int AS unused',
      );
      await ctx.insertFrom(
        'calendar-missing-days',
        COLUMNS,
        `SELECT first_day, last_day, days::float8, 0::float8, days::float8,
           CASE WHEN days = 1 THEN format('%s has sales days around it but no calendar row', first_day)
                ELSE format('%s days %s..%s have sales days around them but no calendar row', days, first_day, last_day) END,
           jsonb_build_object('days', days)
         FROM (${missing}) m`,
        [formatDay(pass.firstDay), formatDay(pass.lastDay)],
      );
    }
    const events = rangesSql(
      'SELECT e.day, e.name FROM events e WHERE NOT EXISTS (SELECT 1 FROM calendar_days c WHERE c.day = e.day)',
      'array_agg(DISTINCT name ORDER BY name) AS names',
    );
    await ctx.insertFrom(
      'event-outside-calendar',
      COLUMNS,
      `SELECT first_day, last_day, days::float8, 0::float8, days::float8,
         format('%s event day(s) %s..%s are not in the calendar (%s)', days, first_day, last_day, array_to_string(names[1:5], ', ')),
         jsonb_build_object('names', to_jsonb(names))
       FROM (${events}) e`,
    );
    const benefits = rangesSql(
      'SELECT b.day, b.region_id FROM benefit_days b WHERE NOT EXISTS (SELECT 1 FROM calendar_days c WHERE c.day = b.day)',
      'array_agg(DISTINCT region_id ORDER BY region_id) AS regions',
    );
    await ctx.insertFrom(
      'benefit-day-outside-calendar',
      COLUMNS,
      `SELECT first_day, last_day, days::float8, 0::float8, days::float8,
         format('%s benefit day(s) %s..%s are not in the calendar (regions %s)', days, first_day, last_day, array_to_string(regions[1:5], ', ')),
         jsonb_build_object('regions', to_jsonb(regions))
       FROM (${benefits}) b`,
    );
  },
});
