import type { SeriesView } from './sales-pass.js';

/** Sold weeks of one series and how many of them have no price row. */
export interface SoldWeeks {
  readonly sold: number;
  readonly unpriced: number;
  /** Week starts (epoch days) of the first and last unpriced sold week; -1 when none. */
  readonly firstUnpriced: number;
  readonly lastUnpriced: number;
}

/**
 * Walks a series' dense days by retail week (a week is sold when its units sum above zero) and
 * merges with the sorted week starts that carry a price. `weekStart` maps a day to its week's
 * first day.
 */
export function soldWeeks(
  s: SeriesView,
  priced: Int32Array | undefined,
  weekStart: (day: number) => number,
): SoldWeeks {
  const u = s.units;
  let sold = 0;
  let unpriced = 0;
  let firstUnpriced = -1;
  let lastUnpriced = -1;
  let p = 0;
  const last = s.firstDay + u.length - 1;
  for (let w = weekStart(s.firstDay); w <= last; w += 7) {
    let sum = 0;
    const a = Math.max(w, s.firstDay) - s.firstDay;
    const b = Math.min(w + 6, last) - s.firstDay;
    for (let i = a; i <= b; i++) {
      const v = u[i]!;
      if (!Number.isNaN(v)) sum += v;
    }
    if (!(sum > 0)) continue;
    sold++;
    if (priced) while (p < priced.length && priced[p]! < w) p++;
    if (priced && p < priced.length && priced[p] === w) continue;
    unpriced++;
    if (firstUnpriced < 0) firstUnpriced = w;
    lastUnpriced = w;
  }
  return { sold, unpriced, firstUnpriced, lastUnpriced };
}
