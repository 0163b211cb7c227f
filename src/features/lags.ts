import { z } from 'zod';
import { cellBoundary, defineFamily, type FeatureColumn, NO_NEEDS } from './family.js';

export const lagsParamsSchema = z
  .object({
    /** Gaps k: the feature is the units on day anchor - k. */
    days: z.array(z.number().int().min(1, 'a lag of at least 1 day').max(3660)).min(1),
  })
  .strict();
export type LagsParams = z.infer<typeof lagsParamsSchema>;

/** `lag_k`: units on day t - k (shift mode) or o + 1 - k (origin mode); NULL without a row. */
export const lags = defineFamily<LagsParams>({
  name: 'lags',
  params: lagsParamsSchema,
  columns(p) {
    return p.days.map(
      (k): FeatureColumn => ({
        name: `lag_${k}`,
        family: 'lags',
        description: `units ${k} day${k === 1 ? '' : 's'} before the anchor day`,
        source: 'sales',
        shift: k,
      }),
    );
  },
  needs(p) {
    return { ...NO_NEEDS, sales: true, salesReach: Math.max(...p.days) };
  },
  compute(p, _set, s, _env, out) {
    const { rows, base, units, maskFrom } = s;
    const len = units.length;
    for (let c = 0; c < p.days.length; c++) {
      const k = p.days[c]!;
      const col = out[c]!;
      for (let r = 0; r < rows.n; r++) {
        const e = cellBoundary(rows, r, k);
        const i = e - base;
        // A masked day is hidden once the boundary (here the day itself) reaches its run's detection day.
        col[r] = i >= 0 && i < len && (maskFrom === null || maskFrom[i]! > e) ? units[i]! : Number.NaN;
      }
    }
  },
});
