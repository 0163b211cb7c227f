import { z } from 'zod';
import { defineFamily, type FeatureColumn, type GroupSeries, NO_NEEDS, type PartitionEnv } from './family.js';
import { defaultGap } from './encodings.js';
import { GROUP_LEVELS, type GroupLevel, LEVELS } from './group-levels.js';
import {
  type DailyValues,
  defaultAlpha,
  WINDOW_STATS,
  type WindowStat,
  windowStats,
} from './window-engine.js';
import { rowEnds } from './windows.js';

export const hierarchyEntrySchema = z
  .object({
    levels: z.array(z.enum(GROUP_LEVELS)).min(1),
    size: z.number().int().min(1, 'a window of at least 1 day').max(3660),
    shift: z.number().int().min(1, 'a shift of at least 1 day').max(3660).optional(),
    stats: z.array(z.enum(WINDOW_STATS)).min(1).default(['mean', 'std']),
    minDays: z.number().int().min(1).optional(),
    alpha: z.number().gt(0).max(1).optional(),
  })
  .strict();
export const hierarchyParamsSchema = z.array(hierarchyEntrySchema).min(1);

export interface HierarchyEntry {
  readonly levels: readonly GroupLevel[];
  readonly size: number;
  readonly shift?: number | undefined;
  readonly stats: readonly WindowStat[];
  readonly minDays?: number | undefined;
  readonly alpha?: number | undefined;
}
export type HierarchyParams = readonly HierarchyEntry[];

export function hierarchyColumnName(
  level: GroupLevel,
  stat: WindowStat,
  size: number,
  shift: number,
): string {
  return `${level}_${stat}_${size}d_s${shift}`;
}

const UNSHARED: ReadonlySet<GroupLevel> = new Set(['item', 'item_region']);

// Buffers for the groups that are not cached (one member series per store): their values and
// statistics are used by one series and copied out before the next.
let valuesBuf = new Float64Array(0);
const statBufs: Float64Array[] = [];
function scratch(k: number, n: number): Float64Array {
  let b = statBufs[k];
  if (!b || b.length < n) statBufs[k] = b = new Float64Array(Math.max(n, 2 * (b?.length ?? 0)));
  return b.subarray(0, n);
}

/** Daily totals of a group as a series: NaN on days without any member row. */
function groupValues(g: GroupSeries, reuse: boolean): DailyValues {
  const len = g.total.length;
  if (reuse && valuesBuf.length < len) valuesBuf = new Float64Array(Math.max(len, 2 * valuesBuf.length));
  const v = reuse ? valuesBuf.subarray(0, len) : new Float64Array(len);
  for (let i = 0; i < v.length; i++) v[i] = g.n[i]! > 0 ? g.total[i]! : Number.NaN;
  return { base: g.base, values: v, maskFrom: null, maskEvents: null };
}

/** Window statistics of a group over ends lo..hi, shared by the partition's series when cached. */
function groupStats(
  env: PartitionEnv,
  level: GroupLevel,
  key: string,
  g: GroupSeries,
  entry: HierarchyEntry,
  lo: number,
  hi: number,
): Float64Array[] {
  const ck = `hier\u001f${level}\u001f${key}\u001f${entry.size}\u001f${entry.stats.join(',')}\u001f${entry.minDays}\u001f${entry.alpha}\u001f${lo}\u001f${hi}`;
  const hit = env.cache.get(ck) as Float64Array[] | undefined;
  if (hit) return hit;
  const shared = !UNSHARED.has(level);
  const out = entry.stats.map((_, k) => (shared ? new Float64Array(hi - lo + 1) : scratch(k, hi - lo + 1)));
  const spec = {
    size: entry.size,
    stats: entry.stats,
    minDays: entry.minDays ?? 1,
    alpha: entry.alpha ?? defaultAlpha(entry.size),
  };
  windowStats(groupValues(g, !shared), spec, lo, hi, out);
  if (shared) env.cache.set(ck, out);
  return out;
}

/**
 * `<level>_<stat>_<w>d_s<g>`: window statistics of the group's daily total units (the sum over
 * its member series; days without any member row are missing) over the w days ending at the
 * boundary, joined back to every member series.
 */
export const hierarchy = defineFamily<HierarchyParams>({
  name: 'hierarchy',
  params: hierarchyParamsSchema as unknown as z.ZodType<HierarchyParams>,
  columns(p, set) {
    return p.flatMap((e) => {
      const g = e.shift ?? defaultGap(set);
      return e.levels.flatMap((level) =>
        e.stats.map(
          (stat): FeatureColumn => ({
            name: hierarchyColumnName(level, stat, e.size, g),
            family: 'hierarchy',
            description: `${stat} of the daily total units of ${LEVELS[level].description} over the ${e.size} days ending ${g} day${g === 1 ? '' : 's'} before the anchor day`,
            source: 'sales',
            shift: g,
          }),
        ),
      );
    });
  },
  needs(p, set) {
    return {
      ...NO_NEEDS,
      groupReach: Math.max(...p.map((e) => (e.shift ?? defaultGap(set)) + e.size - 1)),
      levels: [...new Set(p.flatMap((e) => e.levels))],
    };
  },
  compute(p, set, s, env, out) {
    const { rows } = s;
    let c = 0;
    for (const e of p) {
      const gap = e.shift ?? defaultGap(set);
      const { ends } = rowEnds(rows, gap);
      const lo = env.anchorLo - gap;
      const hi = env.anchorHi - gap;
      for (const level of e.levels) {
        const key = s.keys[level];
        const g = key === null ? null : env.group(level, key);
        if (g === null || key === null) {
          for (let k = 0; k < e.stats.length; k++) out[c++]!.fill(Number.NaN, 0, rows.n);
          continue;
        }
        const stats = groupStats(env, level, key, g, e, lo, hi);
        for (let k = 0; k < stats.length; k++) {
          const col = out[c++]!;
          const src = stats[k]!;
          for (let r = 0; r < rows.n; r++) {
            const j = ends[r]! - lo;
            col[r] = j >= 0 && j < src.length ? src[j]! : Number.NaN;
          }
        }
      }
    }
  },
});
