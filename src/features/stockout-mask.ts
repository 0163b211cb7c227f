import { classifyZeroRuns, DEFAULT_STOCKOUT_PARAMS, type StockoutParams } from '../checks/stockout-rule.js';
import { NEVER } from './family.js';

export interface StockoutMask {
  /** Per day from `base`: the first boundary from which the day counts as missing, else NEVER. */
  readonly maskFrom: Int32Array;
  /** Distinct finite values of `maskFrom`, ascending. */
  readonly events: Int32Array;
  /** How many runs are masked. */
  readonly runs: number;
}

/**
 * The stock-out mask of one series (DESIGN.md, leak-free rule 5). The rule sees only days up
 * to the cutoff: `units` is dense from `base`, and entries past `cutoff` are ignored. A run that
 * became detectable on day `det` (start + k* - 1: stock-out runs, and open runs that already
 * reached k*) hides its days only from cells whose boundary is on or after `det`; a cell never
 * sees a run day past its own boundary anyway, so the mask reads nothing past a boundary.
 * Returns null when nothing is masked.
 */
export function stockoutMask(
  base: number,
  units: Float64Array,
  cutoff: number,
  params: StockoutParams = DEFAULT_STOCKOUT_PARAMS,
): StockoutMask | null {
  const upto = Math.min(units.length, cutoff - base + 1);
  if (upto <= 0) return null;
  const runs = classifyZeroRuns(units.subarray(0, upto), params);
  let maskFrom: Int32Array | null = null;
  const events: number[] = [];
  let count = 0;
  for (const r of runs) {
    if (r.detectable < 0 || (r.kind !== 'stockout' && r.kind !== 'open')) continue;
    maskFrom ??= new Int32Array(units.length).fill(NEVER);
    const det = base + r.detectable;
    maskFrom.fill(det, r.start, r.end + 1);
    events.push(det);
    count++;
  }
  if (maskFrom === null) return null;
  const uniq = Int32Array.from(new Set(events)).sort();
  return { maskFrom, events: uniq, runs: count };
}
