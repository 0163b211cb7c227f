import type { z } from 'zod';
import { formatDay } from '../core/days.js';
import { checkParams, defineCheck, intAtLeast, share } from './check-definition.js';
import type { FindingDraft } from './finding.js';
import type { DailyTotals } from './sales-pass.js';

export const seriesGapsParams = checkParams(['series-gaps', 'chain-missing-days'], {
  /** Report a series only when at least this many of its own days are missing inside its span. */
  minMissingDays: intAtLeast(1, 1),
  /**
   * A day on which more than this share of the active series have no row is a chain-wide gap (a
   * partial load): reported once instead of once per series (common practice: most series).
   */
  chainShare: share(0.5),
});
export type SeriesGapsParams = z.output<typeof seriesGapsParams>;

/** How many missing days a finding lists in its details. */
const LISTED_DAYS = 10;

/**
 * Days on which more than `share` of the series active that day (first to last stored day)
 * have no row. `spans` holds each series' [first, last] epoch days, flat.
 */
export function chainMissingDays(
  daily: DailyTotals,
  spans: ArrayLike<number>,
  n: number,
  share: number,
): Set<number> {
  const len = daily.units.length;
  const delta = new Int32Array(len + 1);
  for (let k = 0; k < n; k++) {
    delta[spans[2 * k]! - daily.firstDay]!++;
    delta[spans[2 * k + 1]! - daily.firstDay + 1]!--;
  }
  const out = new Set<number>();
  let active = 0;
  for (let i = 0; i < len; i++) {
    active += delta[i]!;
    if (active > 0 && active - daily.rows[i]! > share * active) out.add(daily.firstDay + i);
  }
  return out;
}

/** Per series: days with no row at all between its first and last stored day (not stored zeros). */
export const seriesGaps = defineCheck({
  name: 'series-gaps',
  description:
    'days with no row inside a series active span (first to last stored day), as opposed to a stored zero',
  codes: {
    'series-gaps': { severity: 'warn', meaning: 'a series has days without any row inside its span' },
    'chain-missing-days': {
      severity: 'warn',
      meaning: 'days on which most series have no row (a partial load)',
    },
  },
  params: seriesGapsParams,
  reads: ['sales'],
  async run(_db, ctx) {
    const p = ctx.params;
    let spans = new Int32Array(2048);
    let nSeries = 0;
    // Gap ranges of the series that have any, kept until the chain-wide days are known.
    const gapped: Array<{ seriesId: number; span: number; ranges: number[] }> = [];
    const pass = await ctx.sales({
      series(s) {
        const u = s.units;
        if (2 * nSeries + 2 > spans.length) {
          const next = new Int32Array(spans.length * 2);
          next.set(spans);
          spans = next;
        }
        spans[2 * nSeries] = s.firstDay;
        spans[2 * nSeries + 1] = s.firstDay + u.length - 1;
        nSeries++;
        if (s.rows === u.length) return; // dense: the common case costs one comparison
        const ranges: number[] = [];
        let i = 0;
        while (i < u.length) {
          if (!Number.isNaN(u[i]!)) {
            i++;
            continue;
          }
          const start = i;
          while (i < u.length && Number.isNaN(u[i]!)) i++;
          ranges.push(s.firstDay + start, s.firstDay + i - 1);
        }
        gapped.push({ seriesId: s.seriesId, span: u.length, ranges });
      },
    });
    const chainDays = chainMissingDays(pass.daily, spans, nSeries, p.chainShare);
    const drafts: FindingDraft[] = [];
    for (const g of gapped) {
      let missing = 0;
      let gaps = 0;
      let longest = 0;
      let longestAt = 0;
      let excluded = 0;
      const listed: string[] = [];
      // Re-split each range around chain-wide days, which the series is not blamed for.
      for (let r = 0; r < g.ranges.length; r += 2) {
        let runStart = -1;
        for (let d = g.ranges[r]!; d <= g.ranges[r + 1]! + 1; d++) {
          const own = d <= g.ranges[r + 1]! && !chainDays.has(d);
          if (d <= g.ranges[r + 1]! && !own) excluded++;
          if (own) {
            if (runStart < 0) runStart = d;
            missing++;
            if (listed.length < LISTED_DAYS) listed.push(formatDay(d));
          } else if (runStart >= 0) {
            gaps++;
            if (d - runStart > longest) {
              longest = d - runStart;
              longestAt = runStart;
            }
            runStart = -1;
          }
        }
      }
      if (missing < p.minMissingDays) continue;
      const last = longestAt + longest - 1;
      drafts.push({
        code: 'series-gaps',
        seriesId: g.seriesId,
        firstDay: longestAt,
        lastDay: last,
        observed: missing,
        threshold: p.minMissingDays,
        rank: missing,
        details: {
          missing_days: missing,
          gaps,
          longest,
          span_days: g.span,
          days: listed,
          chain_days_excluded: excluded,
        },
        message:
          `${missing} day(s) without a row in ${gaps} gap(s) inside a ${g.span}-day span; ` +
          `longest ${longest} day(s) ${formatDay(longestAt)}..${formatDay(last)}`,
      });
    }
    const sorted = [...chainDays].sort((a, b) => a - b);
    for (const d of sorted) {
      const i = d - pass.daily.firstDay;
      let active = 0;
      for (let k = 0; k < nSeries; k++) if (spans[2 * k]! <= d && spans[2 * k + 1]! >= d) active++;
      const absent = active - pass.daily.rows[i]!;
      drafts.push({
        code: 'chain-missing-days',
        firstDay: d,
        lastDay: d,
        observed: absent / active,
        threshold: p.chainShare,
        rank: absent / active,
        details: { series_missing: absent, active_series: active },
        message: `${absent} of ${active} active series have no row on ${formatDay(d)} (${((100 * absent) / active).toFixed(0)}%)`,
      });
    }
    await ctx.write(drafts);
  },
});
