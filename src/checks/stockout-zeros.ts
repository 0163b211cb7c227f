import { z } from 'zod';
import { formatDay } from '../core/days.js';
import { checkParams, defineCheck, intAtLeast, probability } from './check-definition.js';
import type { FindingDraft, StockoutDetails } from './finding.js';
import { DEFAULT_STOCKOUT_PARAMS, reportedZeroRuns, type ZeroRun } from './stockout-rule.js';

export const stockoutZerosParams = checkParams(['stockout', 'open-zero-run', 'pre-launch', 'never-sold'], {
  /** Per-run false-alarm level (DESIGN.md: 1e-6, since a chain tests hundreds of thousands of runs). */
  alpha: probability(DEFAULT_STOCKOUT_PARAMS.alpha),
  lookback: intAtLeast(7, DEFAULT_STOCKOUT_PARAMS.lookback),
  minHistory: intAtLeast(2, DEFAULT_STOCKOUT_PARAMS.minHistory),
  /** Report each series' leading zeros as `pre-launch` (info). */
  reportPreLaunch: z.boolean({ error: 'expected true or false' }).default(true),
});
export type StockoutZerosParams = z.output<typeof stockoutZerosParams>;

function details(r: ZeroRun): StockoutDetails {
  return {
    length: r.end - r.start + 1,
    mean: r.mean,
    variance: r.variance,
    p0: r.p0,
    k_star: r.kStar,
    model: r.variance > r.mean ? 'negative-binomial' : 'poisson',
  };
}

/** Runs of zero days too long for the series' recent rate: likely stock-outs (DESIGN.md). */
export const stockoutZeros = defineCheck({
  name: 'stockout-zeros',
  description: 'runs of zero-unit days improbable under the series recent rate (negative binomial / Poisson)',
  codes: {
    stockout: { severity: 'warn', meaning: 'a closed run of zeros reached k* days: a likely stock-out' },
    'open-zero-run': {
      severity: 'info',
      meaning: 'a run of zeros still open at the cutoff, already past k*',
    },
    'pre-launch': { severity: 'info', meaning: 'zero days before the series first sale' },
    'never-sold': { severity: 'info', meaning: 'a series whose stored days are all zero or negative' },
  },
  params: stockoutZerosParams,
  reads: ['sales'],
  async run(_db, ctx) {
    const p = ctx.params;
    const rule = { alpha: p.alpha, lookback: p.lookback, minHistory: p.minHistory };
    const drafts: FindingDraft[] = [];
    await ctx.sales({
      series(s) {
        const u = s.units;
        let firstSale = -1;
        for (let i = 0; i < u.length; i++) {
          if (u[i]! > 0) {
            firstSale = i;
            break;
          }
        }
        if (firstSale < 0) {
          drafts.push({
            code: 'never-sold',
            seriesId: s.seriesId,
            firstDay: s.firstDay,
            lastDay: s.firstDay + u.length - 1,
            observed: s.rows,
            details: { days: s.rows },
            message: `no positive sale in ${s.rows} stored days`,
          });
          return;
        }
        if (firstSale > 0 && p.reportPreLaunch) {
          let zeros = 0;
          for (let i = 0; i < firstSale; i++) if (u[i] === 0) zeros++;
          if (zeros > 0) {
            drafts.push({
              code: 'pre-launch',
              seriesId: s.seriesId,
              firstDay: s.firstDay,
              lastDay: s.firstDay + firstSale - 1,
              observed: zeros,
              details: { zero_days: zeros, first_sale: formatDay(s.firstDay + firstSale) },
              message: `${zeros} zero day${zeros === 1 ? '' : 's'} before the first sale on ${formatDay(s.firstDay + firstSale)}`,
            });
          }
        }
        for (const r of reportedZeroRuns(u, rule)) {
          const len = r.end - r.start + 1;
          const first = s.firstDay + r.start;
          const last = s.firstDay + r.end;
          const d = details(r);
          const rate = `${r.mean.toFixed(2)} units/day (p0 ${r.p0.toPrecision(3)}, ${d.model})`;
          drafts.push({
            code: r.kind === 'stockout' ? 'stockout' : 'open-zero-run',
            seriesId: s.seriesId,
            firstDay: first,
            lastDay: last,
            detectableDay: s.firstDay + r.detectable,
            observed: len,
            threshold: r.kStar,
            // Improbability of the run, -log10(p0^k): orders the worst examples.
            rank: -len * Math.log10(Math.max(r.p0, 1e-300)),
            details: d,
            message:
              r.kind === 'stockout'
                ? `${len} zero days ${formatDay(first)}..${formatDay(last)} after ${rate}; improbable from ${r.kStar} days`
                : `${len} zero days open at ${formatDay(last)} after ${rate}; improbable from ${r.kStar} days`,
          });
        }
      },
    });
    await ctx.write(drafts);
  },
});
