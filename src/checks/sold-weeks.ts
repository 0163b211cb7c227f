/** Sold weeks of one series and how many of them have no price row. */
export interface SoldWeeks {
  readonly sold: number;
  readonly unpriced: number;
  /** Week starts (epoch days) of the first and last unpriced sold week; -1 when none. */
  readonly firstUnpriced: number;
  readonly lastUnpriced: number;
}

/**
 * The retail weeks (their first days, ascending) in which a dense daily series sold: units summed
 * over the week's stored days above zero. `weekStart` maps a day to its week's first day.
 */
export function soldWeekStarts(
  firstDay: number,
  units: ArrayLike<number>,
  weekStart: (day: number) => number,
): Int32Array {
  const last = firstDay + units.length - 1;
  const first = weekStart(firstDay);
  const out = new Int32Array(Math.floor((last - first) / 7) + 1);
  let n = 0;
  for (let w = first; w <= last; w += 7) {
    let sum = 0;
    const a = Math.max(w, firstDay) - firstDay;
    const b = Math.min(w + 6, last) - firstDay;
    for (let i = a; i <= b; i++) {
      const v = units[i] as number;
      if (!Number.isNaN(v)) sum += v;
    }
    if (sum > 0) out[n++] = w;
  }
  return out.slice(0, n);
}

/** Merges sold week starts with the sorted week starts that carry a price. */
export function unpricedWeeks(sold: Int32Array, priced: Int32Array | undefined): SoldWeeks {
  let unpriced = 0;
  let firstUnpriced = -1;
  let lastUnpriced = -1;
  let p = 0;
  for (let k = 0; k < sold.length; k++) {
    const w = sold[k]!;
    if (priced) while (p < priced.length && priced[p]! < w) p++;
    if (priced && p < priced.length && priced[p] === w) continue;
    unpriced++;
    if (firstUnpriced < 0) firstUnpriced = w;
    lastUnpriced = w;
  }
  return { sold: sold.length, unpriced, firstUnpriced, lastUnpriced };
}
