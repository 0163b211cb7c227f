import type { z } from 'zod';
import { checkParams, defineCheck, share } from './check-definition.js';
import type { FindingDraft } from './finding.js';
import { unpricedWeeks } from './sold-weeks.js';

export const priceCoverageParams = checkParams(['price-coverage'], {
  /** Largest acceptable share of sold series-weeks without a price (common practice: 5%). */
  maxUnpricedShare: share(0.05),
});
export type PriceCoverageParams = z.output<typeof priceCoverageParams>;

/** The share of sold series-weeks with no price, chain-wide and per store. */
export const priceCoverage = defineCheck({
  name: 'price-coverage',
  description: 'share of sold series-weeks without a price, chain-wide and per store, above a threshold',
  codes: {
    'price-coverage': { severity: 'warn', meaning: 'too many sold series-weeks lack a price' },
  },
  params: priceCoverageParams,
  reads: ['prices', 'sales'],
  async run(db, ctx) {
    const limit = ctx.params.maxUnpricedShare;
    // Joined first: the shared passes start once every reader has, so no query may delay them.
    const soldBy = new Map<number, Int32Array>();
    const passes = Promise.all([
      ctx.prices(),
      ctx.sales({
        series(s) {
          soldBy.set(s.seriesId, s.soldWeeks());
        },
      }),
    ]);
    passes.catch(() => {}); // awaited below, after the store query
    const storeOf = new Map<number, string>();
    const res = await db.query<{ series_id: number; store_id: string }>(
      'SELECT series_id, store_id FROM series',
    );
    for (const r of res.rows) storeOf.set(r.series_id, r.store_id);
    const [priced] = await passes;
    const byStore = new Map<string, { sold: number; unpriced: number }>();
    let sold = 0;
    let unpriced = 0;
    for (const [seriesId, weeks] of soldBy) {
      const c = unpricedWeeks(weeks, priced.pricedWeeks.get(seriesId));
      sold += c.sold;
      unpriced += c.unpriced;
      const store = storeOf.get(seriesId) ?? '';
      const t = byStore.get(store) ?? { sold: 0, unpriced: 0 };
      t.sold += c.sold;
      t.unpriced += c.unpriced;
      byStore.set(store, t);
    }
    const drafts: FindingDraft[] = [];
    const pct = (x: number) => `${(100 * x).toFixed(1)}%`;
    if (sold > 0 && unpriced / sold > limit) {
      drafts.push({
        code: 'price-coverage',
        observed: unpriced / sold,
        threshold: limit,
        rank: unpriced / sold,
        details: { unpriced_weeks: unpriced, sold_weeks: sold, scope: 'chain' },
        message: `${pct(unpriced / sold)} of ${sold} sold series-weeks have no price (limit ${pct(limit)})`,
      });
    }
    for (const [store, t] of [...byStore].sort((a, b) => (a[0] < b[0] ? -1 : 1))) {
      if (t.sold === 0 || t.unpriced / t.sold <= limit) continue;
      drafts.push({
        code: 'price-coverage',
        storeId: store || null,
        observed: t.unpriced / t.sold,
        threshold: limit,
        rank: t.unpriced / t.sold,
        details: { unpriced_weeks: t.unpriced, sold_weeks: t.sold, scope: 'store' },
        message: `store ${store}: ${pct(t.unpriced / t.sold)} of ${t.sold} sold series-weeks have no price (limit ${pct(limit)})`,
      });
    }
    await ctx.write(drafts);
  },
});
