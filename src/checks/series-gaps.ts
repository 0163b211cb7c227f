import type { z } from 'zod';
import { formatDay } from '../core/days.js';
import { checkParams, defineCheck, intAtLeast } from './check-definition.js';
import type { FindingDraft } from './finding.js';

export const seriesGapsParams = checkParams(['series-gaps'], {
  /** Report a series only when at least this many days are missing inside its span. */
  minMissingDays: intAtLeast(1, 1),
});
export type SeriesGapsParams = z.output<typeof seriesGapsParams>;

/** Per series: days with no row at all between its first and last stored day (not stored zeros). */
export const seriesGaps = defineCheck({
  name: 'series-gaps',
  description: 'days with no row inside a series active span (first to last stored day)',
  codes: {
    'series-gaps': { severity: 'warn', meaning: 'a series has days without any row inside its span' },
  },
  params: seriesGapsParams,
  reads: ['sales'],
  async run(_db, ctx) {
    const drafts: FindingDraft[] = [];
    const min = ctx.params.minMissingDays;
    await ctx.sales({
      series(s) {
        const u = s.units;
        if (s.rows === u.length) return; // dense: the common case costs one comparison
        let missing = 0;
        let gaps = 0;
        let longest = 0;
        let longestAt = 0;
        let i = 0;
        while (i < u.length) {
          if (!Number.isNaN(u[i]!)) {
            i++;
            continue;
          }
          const start = i;
          while (i < u.length && Number.isNaN(u[i]!)) i++;
          const len = i - start;
          missing += len;
          gaps++;
          if (len > longest) {
            longest = len;
            longestAt = start;
          }
        }
        if (missing < min) return;
        const first = s.firstDay + longestAt;
        const last = first + longest - 1;
        drafts.push({
          code: 'series-gaps',
          seriesId: s.seriesId,
          firstDay: first,
          lastDay: last,
          observed: missing,
          threshold: min,
          rank: missing,
          details: { missing_days: missing, gaps, longest, span_days: u.length },
          message:
            `${missing} day(s) without a row in ${gaps} gap(s) inside a ${u.length}-day span; ` +
            `longest ${longest} day(s) ${formatDay(first)}..${formatDay(last)}`,
        });
      },
    });
    await ctx.write(drafts);
  },
});
