import { z } from 'zod';
import { formatDay, parseDay } from '../core/days.js';
import { checkParams, defineCheck, intAtLeast } from './check-definition.js';

export const freshnessParams = checkParams(['stale', 'no-sales'], {
  /**
   * The day the newest sales should reach: `today` (the run's UTC day) or a fixed ISO day. A
   * run with `--cutoff` expects the cutoff instead.
   */
  expectedCutoff: z
    .string({ error: "expected 'today' or a day YYYY-MM-DD" })
    .refine((v) => v === 'today' || parseDay(v) !== null, { error: "expected 'today' or a day YYYY-MM-DD" })
    .default('today'),
  /** Days the newest sales may trail the expected cutoff (common practice: one, yesterday's sales land overnight). */
  lagDays: intAtLeast(0, 1),
});
export type FreshnessParams = z.output<typeof freshnessParams>;

/** The newest sales day is older than the expected cutoff minus the allowed lag. */
export const freshness = defineCheck({
  name: 'freshness',
  description:
    'the newest sales day is older than the expected cutoff minus a lag (blocks in scheduled runs)',
  codes: {
    stale: {
      severity: 'block',
      meaning: 'sales stop before the expected cutoff minus the lag (warn outside scheduled runs)',
    },
    'no-sales': { severity: 'block', meaning: 'no sales rows at all up to the cutoff' },
  },
  params: freshnessParams,
  reads: ['sales'],
  async run(_db, ctx) {
    const p = ctx.params;
    const pass = await ctx.sales();
    const expected = ctx.cutoff ?? (p.expectedCutoff === 'today' ? ctx.today : parseDay(p.expectedCutoff)!);
    if (pass.lastDay === null) {
      await ctx.write([
        {
          code: 'no-sales',
          details: {},
          message:
            ctx.cutoff === null
              ? 'the sales table is empty'
              : `no sales rows on or before ${formatDay(ctx.cutoff)}`,
        },
      ]);
      return;
    }
    const behind = expected - pass.lastDay;
    if (behind <= p.lagDays) return;
    // Stale data is routine while exploring old data by hand; a scheduled refresh must not go on.
    const severity = p.severity !== undefined ? ctx.severity('stale') : ctx.scheduled ? 'block' : 'warn';
    await ctx.write([
      {
        code: 'stale',
        severity,
        lastDay: pass.lastDay,
        observed: behind,
        threshold: p.lagDays,
        rank: behind,
        details: {
          newest_day: formatDay(pass.lastDay),
          expected_cutoff: formatDay(expected),
          lag_days: p.lagDays,
        },
        message: `newest sales day ${formatDay(pass.lastDay)} is ${behind} days before the expected cutoff ${formatDay(expected)} (allowed lag ${p.lagDays})`,
      },
    ]);
  },
});
