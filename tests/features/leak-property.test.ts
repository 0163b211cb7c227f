import fc from 'fast-check';
import { describe, expect, test } from 'vitest';
import { computeSeriesFeatures } from '../../src/build/compute-series.js';
import { type RowLayout, seriesRows, trainingOrigins } from '../../src/build/series-rows.js';
import { cellBoundary, type GroupSeries, type PartitionEnv } from '../../src/features/family.js';
import { parseFeatureSet, unsafeFeatureSet } from '../../src/features/feature-set.js';
import type { GroupLevel } from '../../src/features/group-levels.js';
import { stockoutMask } from '../../src/features/stockout-mask.js';

/**
 * Leak-freedom as a property (DESIGN.md rules 1, 4, 5): for random small stores, changing any
 * sales value after a day B changes no cell whose boundary is on or before B. The data arrays
 * run past the cutoff, so the feature code is held to its boundaries on its own, not only by
 * the build reading sales up to the cutoff.
 */
const N_DAYS = 140;
const SERIES = 4;
// Series 0 and 1 sell the same item (an item group of two members); all share one store.
const ITEM = [0, 0, 1, 2];

// How many series the stock-out mask hid days of (so the property is known to exercise it).
let maskedSeries = 0;

interface Store {
  units: Float64Array[];
}

function groupOf(store: Store, members: number[]): GroupSeries {
  const total = new Float64Array(N_DAYS);
  const n = new Float64Array(N_DAYS);
  for (const m of members)
    for (let d = 0; d < N_DAYS; d++) {
      const v = store.units[m]![d]!;
      if (!Number.isNaN(v)) {
        total[d]! += v;
        n[d]! += 1;
      }
    }
  return { base: 0, total, n };
}

function features(set: ReturnType<typeof unsafeFeatureSet>, store: Store, C: number, from: number) {
  const all = [0, 1, 2, 3];
  const groups = new Map<string, GroupSeries>();
  const keyed = (level: GroupLevel, key: string | null): GroupSeries | null => {
    if (key === null) return null;
    const k = `${level}/${key}`;
    if (!groups.has(k)) {
      const members = level === 'item' ? all.filter((s) => `i${ITEM[s]}` === key) : all;
      groups.set(k, groupOf(store, members));
    }
    return groups.get(k)!;
  };
  const layout: RowLayout = {
    mode: set.shape.mode,
    cutoff: C,
    horizon: set.shape.horizon,
    from,
    origins: trainingOrigins(C, from, 2),
  };
  const anchorLo = set.shape.mode === 'shift' ? from : layout.origins[0]! + 1;
  const env: PartitionEnv = {
    cutoff: C,
    priceBoundary: C,
    weekStart: 6,
    anchorLo,
    anchorHi: set.shape.mode === 'shift' ? C + set.shape.horizon : C + 1,
    calendar: null,
    prices: null,
    deptPrices: null,
    deptMeans: null,
    departmentOf: null,
    group: keyed,
    cache: new Map(),
  };
  return all.map((s) => {
    const units = store.units[s]!;
    const rows = seriesRows(layout, 0, units);
    const mask = set.stockout ? stockoutMask(0, units, C, set.stockout) : null;
    if (mask) maskedSeries++;
    const keys = {
      total: '',
      region: 'north',
      store: 'st1',
      category: 'c0',
      department: 'd0',
      item: `i${ITEM[s]}`,
      store_category: 'st1/c0',
      store_department: 'st1/d0',
      item_region: `i${ITEM[s]}/north`,
    } as const;
    const cols = computeSeriesFeatures(
      set,
      {
        seriesId: s,
        cutoff: C,
        base: 0,
        units,
        maskFrom: mask?.maskFrom ?? null,
        maskEvents: mask?.events ?? null,
        rows,
        keys,
        itemId: `i${ITEM[s]}`,
      },
      env,
    );
    return { rows, cols };
  });
}

// Units with long zero runs (so the stock-out mask has work) and missing days.
const dayValue = fc.oneof(
  { weight: 6, arbitrary: fc.integer({ min: 0, max: 12 }) },
  { weight: 1, arbitrary: fc.constant(Number.NaN) },
);
const storeArb = fc
  .tuple(
    fc.array(fc.array(dayValue, { minLength: N_DAYS, maxLength: N_DAYS }), {
      minLength: SERIES,
      maxLength: SERIES,
    }),
    fc.array(fc.tuple(fc.nat(SERIES - 1), fc.nat(N_DAYS - 1), fc.integer({ min: 5, max: 40 })), {
      maxLength: 5,
    }),
  )
  .map(([raw, runs]) => {
    const units = raw.map((r) => Float64Array.from(r));
    for (const [s, start, len] of runs)
      for (let d = start; d < Math.min(N_DAYS, start + len); d++) units[s]![d] = 0;
    return { units };
  });

function definition(mode: 'shift' | 'origin', H: number, g: number, w: number, mask: boolean) {
  const shift = mode === 'shift' ? Math.max(g, H) : g;
  return parseFeatureSet({
    name: 'prop',
    horizon: H,
    mode,
    stockoutMask: mask ? { alpha: 0.01, lookback: 28, minHistory: 7 } : false,
    families: {
      lags: { days: [shift, shift + 3] },
      windows: [
        { size: w, shift },
        { size: 2 * w + 1, shift: shift + 1, stats: ['mean', 'ewm', 'min'] },
      ],
      encodings: [{ groups: ['item', 'store', 'item_region'], window: w, shift, m: 3 }],
      hierarchy: [{ levels: ['store', 'item'], size: w, shift, stats: ['mean', 'std', 'max', 'ewm'] }],
    },
  });
}

/** Cells that must not change when every value after day B changes, and those that did. */
function leakedCells(
  set: ReturnType<typeof unsafeFeatureSet>,
  a: Store,
  b: Store,
  C: number,
  from: number,
  B: number,
) {
  const fa = features(set, a, C, from);
  const fb = features(set, b, C, from);
  const bad: string[] = [];
  let checked = 0;
  for (let s = 0; s < SERIES; s++) {
    const { rows, cols } = fa[s]!;
    const other = fb[s]!;
    expect(other.rows.n).toBe(rows.n);
    set.columns.forEach((c, k) => {
      for (let r = 0; r < rows.n; r++) {
        if (cellBoundary(rows, r, c.shift) > B) continue;
        checked++;
        const x = cols[k]![r]!;
        const y = other.cols[k]![r]!;
        if (!(Object.is(x, y) || (Number.isNaN(x) && Number.isNaN(y))))
          bad.push(`s${s} t${rows.day[r]} ${c.name}: ${x} -> ${y}`);
      }
    });
  }
  return { bad, checked };
}

const perturb = (store: Store, B: number, seed: number): Store => ({
  units: store.units.map((u, s) =>
    u.map((v, d) =>
      d <= B || Number.isNaN(v) ? v : ((v * 7 + d * 3 + s + seed) % 11) * ((d + seed) % 5 === 0 ? 0 : 1),
    ),
  ),
});

describe('no cell depends on sales after its boundary', () => {
  test.each(['shift', 'origin'] as const)('%s mode, masking on and off', (mode) => {
    maskedSeries = 0;
    fc.assert(
      fc.property(
        storeArb,
        fc.integer({ min: 1, max: 5 }),
        fc.integer({ min: 1, max: 6 }),
        fc.integer({ min: 2, max: 10 }),
        fc.boolean(),
        fc.integer({ min: 0, max: 60 }),
        fc.nat(1000),
        (store, H, g, w, mask, bOff, seed) => {
          const C = 110;
          const from = 70;
          const B = 70 + bOff; // from the first training day to past the cutoff
          const set = unsafeFeatureSet(definition(mode, H, g, w, mask));
          const { bad, checked } = leakedCells(set, store, perturb(store, B, seed), C, from, B);
          expect(bad.slice(0, 5)).toEqual([]);
          expect(checked).toBeGreaterThan(0);
        },
      ),
      { numRuns: 60 },
    );
    expect(maskedSeries).toBeGreaterThan(10);
  });

  test('the property catches a window measured past its boundary', () => {
    const def = definition('shift', 3, 3, 6, false);
    const leaky = unsafeFeatureSet({
      ...def,
      families: { windows: [{ size: 6, shift: 3, stats: ['mean'], lead: 2 }] },
    } as unknown as typeof def);
    const store = fc.sample(storeArb, { numRuns: 1, seed: 7 })[0]!;
    expect(leakedCells(leaky, store, perturb(store, 90, 1), 110, 70, 90).bad.length).toBeGreaterThan(0);
  });
});
