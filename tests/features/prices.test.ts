import fc from 'fast-check';
import { expect, test } from 'vitest';
import type { PartitionEnv, SeriesInput } from '../../src/features/family.js';
import {
  departmentMeans,
  PRICE_FEATURES,
  priceRowFor,
  priceRowStats,
  prices,
  weekStartOf,
} from '../../src/features/prices.js';

// The family walks the weeks alongside the rows; every cell must be the one the documented
// rule picks for its day on its own (priceRowFor), for days in any order (origin mode restarts),
// though it computes only the price rows from the first one a day uses.
test('price cells equal the per-day rule for rows in any day order', () => {
  const weekStart = 6; // Saturday
  fc.assert(
    fc.property(
      fc.uniqueArray(fc.integer({ min: 0, max: 60 }), { minLength: 1, maxLength: 40 }),
      fc.array(fc.integer({ min: 0, max: 80 * 7 }), { minLength: 1, maxLength: 60 }),
      fc.integer({ min: 0, max: 70 * 7 }),
      (weekNos, dayOffsets, boundaryOffset) => {
        const first = weekStartOf(19000, weekStart);
        const sorted = [...weekNos].sort((a, b) => a - b);
        const boundary = first + boundaryOffset;
        const weeks = Int32Array.from(sorted.map((w) => first + 7 * w).filter((w) => w <= boundary));
        if (weeks.length === 0) return;
        const values = Float64Array.from(weeks, (_, i) => 1 + ((i * 37) % 11) * 0.25);
        const day = Int32Array.from(dayOffsets, (d) => first + d);
        const n = day.length;
        const features = [...PRICE_FEATURES];
        const out = features.map(() => new Float64Array(n));
        // The department holds the item and one other whose price is 1.25 in even weeks, so
        // the department's features change from week to week.
        const dept = new Map<number, Map<number, number>>();
        weeks.forEach((w, i) => {
          const counts = new Map<number, number>([[Math.round(values[i]! * 10000), 1]]);
          if (i % 2 === 0) counts.set(12500, (counts.get(12500) ?? 0) + 1);
          dept.set(w, counts);
        });
        const deptPrices = new Map([['d1', dept]]);
        const deptMeans = departmentMeans(deptPrices);
        const env = {
          weekStart,
          priceBoundary: boundary,
          prices: new Map([['i1', { weeks, prices: values }]]),
          departmentOf: new Map([['i1', 'd1']]),
          deptPrices,
          deptMeans,
        } as unknown as PartitionEnv;
        const series = { itemId: 'i1', rows: { n, day, anchor: day, limit: day } } as unknown as SeriesInput;
        prices.compute({ features }, { horizon: 7, mode: 'origin' }, series, env, out);
        const stats = priceRowStats(
          { weeks, prices: values },
          dept,
          (w) => deptMeans.get('d1')?.get(w) ?? Number.NaN,
        );
        for (let r = 0; r < n; r++) {
          const k = priceRowFor(weeks, day[r]!, weekStart, boundary);
          features.forEach((f, c) => {
            const want = k >= 0 ? stats.values.get(f)![k]! : Number.NaN;
            expect(Object.is(out[c]![r], want)).toBe(true);
          });
        }
      },
    ),
    { numRuns: 300 },
  );
});
