import { z } from 'zod';
import {
  cellBoundary,
  defineFamily,
  type FeatureColumn,
  type GroupSeries,
  NO_NEEDS,
  type PartitionEnv,
  type SetShape,
} from './family.js';
import { type GroupLevel, LEVELS } from './group-levels.js';

export const ENCODING_GROUPS = [
  'region',
  'store',
  'category',
  'department',
  'item',
  'store_category',
  'store_department',
  'item_region',
] as const satisfies readonly GroupLevel[];
export type EncodingGroup = (typeof ENCODING_GROUPS)[number];

export const encodingEntrySchema = z
  .object({
    groups: z.array(z.enum(ENCODING_GROUPS)).min(1),
    /** Trailing days W ending at the boundary. */
    window: z.number().int().min(1, 'a window of at least 1 day').max(3660),
    /** Gap g; default the horizon (shift mode) or 1 (origin mode). */
    shift: z.number().int().min(1, 'a shift of at least 1 day').max(3660).optional(),
    /** Weight of the prior, in observations (series-days). */
    m: z.number().min(0).default(10),
  })
  .strict();
export const encodingsParamsSchema = z.array(encodingEntrySchema).min(1);

export interface EncodingEntry {
  readonly groups: readonly EncodingGroup[];
  readonly window: number;
  readonly shift?: number | undefined;
  readonly m: number;
  /** Test-only: average over every day up to the cutoff, ignoring the row's boundary (a leak). */
  readonly wholeHistory?: boolean;
}
export type EncodingsParams = readonly EncodingEntry[];

/** The gap used when an entry gives none: the horizon in shift mode, 1 in origin mode. */
export function defaultGap(set: SetShape): number {
  return set.mode === 'shift' ? set.horizon : 1;
}

export function encodingColumnName(group: EncodingGroup, window: number, shift: number): string {
  return `enc_${group}_${window}d_s${shift}`;
}

/** Levels read: each group and its parent (the prior). */
export function encodingLevels(p: EncodingsParams): GroupLevel[] {
  const out = new Set<GroupLevel>();
  for (const e of p)
    for (const g of e.groups) {
      out.add(g);
      const parent = LEVELS[g].parent;
      if (parent) out.add(parent);
    }
  return [...out];
}

interface Prefix {
  readonly base: number;
  /** sums[i] = total of days base .. base + i - 1; counts likewise for member rows. */
  readonly sums: Float64Array;
  readonly counts: Float64Array;
}

// Levels with one member series per store are not worth caching across a store's series.
const UNSHARED: ReadonlySet<GroupLevel> = new Set(['item', 'item_region']);

// Prefix buffers of the uncached levels, one pair per role (0 the group, 1 its parent): both
// may be uncached at once (item_region and its parent item), and each is used by one series.
const prefixBufs: Float64Array[] = [];
function prefixBuf(k: number, n: number): Float64Array {
  let b = prefixBufs[k];
  if (!b || b.length < n) prefixBufs[k] = b = new Float64Array(Math.max(n, 2 * (b?.length ?? 0)));
  return b.subarray(0, n);
}

function prefixOf(env: PartitionEnv, level: GroupLevel, key: string, g: GroupSeries, role: 0 | 1): Prefix {
  const ck = `enc-prefix\u001f${level}\u001f${key}`;
  const hit = env.cache.get(ck) as Prefix | undefined;
  if (hit) return hit;
  const len = g.total.length;
  const cached = !UNSHARED.has(level);
  const sums = cached ? new Float64Array(len + 1) : prefixBuf(2 * role, len + 1);
  const counts = cached ? new Float64Array(len + 1) : prefixBuf(2 * role + 1, len + 1);
  sums[0] = 0;
  counts[0] = 0;
  for (let i = 0; i < len; i++) {
    sums[i + 1] = sums[i]! + g.total[i]!;
    counts[i + 1] = counts[i]! + g.n[i]!;
  }
  const p = { base: g.base, sums, counts };
  if (cached) env.cache.set(ck, p);
  return p;
}

/** Sum over days lo..hi (inclusive) from a prefix array; days outside the data count as empty. */
function rangeSum(pre: Float64Array, base: number, lo: number, hi: number): number {
  const len = pre.length - 1;
  const a = Math.max(0, Math.min(len, lo - base));
  const b = Math.max(0, Math.min(len, hi - base + 1));
  return b > a ? pre[b]! - pre[a]! : 0;
}

/**
 * `enc_<group>_<W>d_s<g>`: the group's mean daily units per member series over the W days
 * ending at the boundary, blended with the parent group's mean over the same days as the
 * m-estimate (n * mean + m * prior) / (n + m), n = member-series days with a row. NULL when
 * the parent has no rows in the window.
 */
export const encodings = defineFamily<EncodingsParams>({
  name: 'encodings',
  params: encodingsParamsSchema as unknown as z.ZodType<EncodingsParams>,
  columns(p, set) {
    return p.flatMap((e) => {
      const g = e.shift ?? defaultGap(set);
      return e.groups.map(
        (grp): FeatureColumn => ({
          name: encodingColumnName(grp, e.window, g),
          family: 'encodings',
          description: `smoothed mean daily units of ${LEVELS[grp].description} over the ${e.window} days ending ${g} day${g === 1 ? '' : 's'} before the anchor day (m = ${e.m}, prior: ${LEVELS[LEVELS[grp].parent!].description})`,
          source: 'sales',
          shift: g,
        }),
      );
    });
  },
  needs(p, set) {
    return {
      ...NO_NEEDS,
      groupReach: Math.max(...p.map((e) => (e.shift ?? defaultGap(set)) + e.window - 1)),
      levels: encodingLevels(p),
    };
  },
  compute(p, set, s, env, out) {
    const { rows } = s;
    let c = 0;
    for (const e of p) {
      const gap = e.shift ?? defaultGap(set);
      for (const grp of e.groups) {
        const col = out[c++]!;
        const parent = LEVELS[grp].parent!;
        const gk = s.keys[grp];
        const pk = s.keys[parent];
        const G = env.group(grp, gk);
        const P = env.group(parent, pk);
        if (!P || gk === null || pk === null) {
          col.fill(Number.NaN, 0, rows.n);
          continue;
        }
        const pp = prefixOf(env, parent, pk, P, 1);
        const gp = G ? prefixOf(env, grp, gk, G, 0) : null;
        for (let r = 0; r < rows.n; r++) {
          const b = e.wholeHistory ? s.cutoff : cellBoundary(rows, r, gap);
          const lo = e.wholeHistory ? -2147483648 : b - e.window + 1;
          const np = rangeSum(pp.counts, pp.base, lo, b);
          if (np === 0) {
            col[r] = Number.NaN;
            continue;
          }
          const prior = rangeSum(pp.sums, pp.base, lo, b) / np;
          const n = gp ? rangeSum(gp.counts, gp.base, lo, b) : 0;
          const sum = gp ? rangeSum(gp.sums, gp.base, lo, b) : 0;
          col[r] = n + e.m > 0 ? (sum + e.m * prior) / (n + e.m) : Number.NaN;
        }
      }
    }
  },
});
