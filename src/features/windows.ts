import { z } from 'zod';
import { cellBoundary, defineFamily, type FeatureColumn, NO_NEEDS, type RowSet } from './family.js';
import {
  type DailyValues,
  defaultAlpha,
  WINDOW_STATS,
  type WindowStat,
  windowStats,
} from './window-engine.js';

export const windowStatSchema = z.enum(WINDOW_STATS);

/** One trailing window: `size` days ending at the boundary, `shift` days before the anchor. */
export const windowEntrySchema = z
  .object({
    size: z.number().int().min(1, 'a window of at least 1 day').max(3660),
    shift: z.number().int().min(1, 'a shift of at least 1 day').max(3660),
    stats: z
      .array(windowStatSchema)
      .min(1)
      .default([...WINDOW_STATS]),
    minDays: z.number().int().min(1).optional(),
    alpha: z.number().gt(0).max(1).optional(),
  })
  .strict();

export const windowsParamsSchema = z.array(windowEntrySchema).min(1);

export interface WindowEntry {
  readonly size: number;
  readonly shift: number;
  readonly stats: readonly WindowStat[];
  readonly minDays?: number | undefined;
  readonly alpha?: number | undefined;
  /**
   * Test-only: measure the window `lead` days later than declared (a centred window when lead
   * is half the size). Not accepted from configuration; the leak audit must catch it.
   */
  readonly lead?: number;
}
export type WindowsParams = readonly WindowEntry[];

const STAT_TEXT: Record<WindowStat, string> = {
  mean: 'mean of daily units',
  std: 'sample standard deviation of daily units',
  min: 'minimum daily units',
  max: 'maximum daily units',
  zero_share: 'share of days with zero units',
  ewm: 'exponentially weighted mean of daily units',
};

export function windowColumnName(stat: WindowStat, size: number, shift: number, prefix = ''): string {
  return `${prefix}${stat}_${size}d_s${shift}`;
}

/** Resolved options of an entry: minimum valid days and smoothing factor. */
export function windowSpec(e: WindowEntry) {
  return { size: e.size, stats: e.stats, minDays: e.minDays ?? 1, alpha: e.alpha ?? defaultAlpha(e.size) };
}

/** Window ends of every row for a gap, and their range; `into` (length >= n) is used when given. */
export function rowEnds(
  rows: RowSet,
  gap: number,
  into?: Int32Array,
): { ends: Int32Array; lo: number; hi: number } {
  const ends = into && into.length >= rows.n ? into : new Int32Array(rows.n);
  let lo = 2147483647;
  let hi = -2147483648;
  for (let r = 0; r < rows.n; r++) {
    const e = cellBoundary(rows, r, gap);
    ends[r] = e;
    if (e < lo) lo = e;
    if (e > hi) hi = e;
  }
  return { ends, lo, hi };
}

// Per-window buffers reused from series to series (compute is synchronous and copies out of
// them before returning): a build runs the windows of every series, so fresh arrays per entry
// were a good share of its garbage.
let endsBuf = new Int32Array(0);
const statBufs: Float64Array[] = [];
function scratchEnds(n: number): Int32Array {
  if (endsBuf.length < n) endsBuf = new Int32Array(Math.max(n, 2 * endsBuf.length));
  return endsBuf;
}
function scratchStat(k: number, n: number): Float64Array {
  let b = statBufs[k];
  if (!b || b.length < n) statBufs[k] = b = new Float64Array(Math.max(n, 2 * (b?.length ?? 0)));
  return b.subarray(0, n);
}

/**
 * `<stat>_<w>d_s<g>`: statistics of the series' own daily units over the w days ending at the
 * boundary (t - g in shift mode, o + 1 - g in origin mode). Days without a row, and stock-out
 * days hidden by the mask, are missing; a window with fewer than `minDays` valid days is NULL.
 */
export const windows = defineFamily<WindowsParams>({
  name: 'windows',
  params: windowsParamsSchema as unknown as z.ZodType<WindowsParams>,
  columns(p) {
    return p.flatMap((e) =>
      e.stats.map(
        (stat): FeatureColumn => ({
          name: windowColumnName(stat, e.size, e.shift),
          family: 'windows',
          description: `${STAT_TEXT[stat]} over the ${e.size} days ending ${e.shift} day${e.shift === 1 ? '' : 's'} before the anchor day`,
          source: 'sales',
          shift: e.shift,
        }),
      ),
    );
  },
  needs(p) {
    return { ...NO_NEEDS, sales: true, salesReach: Math.max(...p.map((e) => e.shift + e.size - 1)) };
  },
  compute(p, _set, s, _env, out) {
    const { rows } = s;
    if (rows.n === 0) return;
    const input: DailyValues = {
      base: s.base,
      values: s.units,
      maskFrom: s.maskFrom,
      maskEvents: s.maskEvents,
    };
    let c = 0;
    for (const entry of p) {
      const { ends, lo, hi } = rowEnds(rows, entry.shift, scratchEnds(rows.n));
      const lead = entry.lead ?? 0;
      const span = hi - lo + 1;
      const tmp = entry.stats.map((_, k) => scratchStat(k, span));
      windowStats(input, windowSpec(entry), lo + lead, hi + lead, tmp);
      for (let k = 0; k < tmp.length; k++, c++) {
        const col = out[c]!;
        const src = tmp[k]!;
        for (let r = 0; r < rows.n; r++) col[r] = src[ends[r]! - lo]!;
      }
    }
  },
});
