import {
  criticalRunLength,
  DEFAULT_STOCKOUT_PARAMS,
  type StockoutParams,
  zeroProbability,
} from '../checks/stockout-rule.js';
import { NEVER } from './family.js';
import type { StockoutMask } from './stockout-mask.js';

/**
 * The stock-out rule's state at a cutoff, so a later cutoff's mask can be had from the newest
 * days alone (the incremental refresh) instead of the whole history. The rule (DESIGN.md,
 * stock-out zeros) is causal: a run's kind depends on its own days and the `lookback` days
 * before it, less days of stock-out runs before it, from the first sale on. So, at cutoff P:
 * every run that ended before P's trailing run is final; the trailing (open) run's k* is fixed
 * by the days before it; and later runs need only the last `lookback` days and which of them
 * lie in stock-out runs. Days are epoch days.
 */
export interface StockoutState {
  /** The cutoff the state is taken at. */
  readonly cutoff: number;
  /** First day with units > 0 up to the cutoff, or null. */
  readonly firstSale: number | null;
  /** Start of the zero run that reaches the cutoff, or null. */
  readonly openStart: number | null;
  /** That run's k* (Infinity when it is pre-launch or has too little history to be judged). */
  readonly openKStar: number;
  /** Stock-out runs that ended before the open run and on or after `keepFrom`: [start, end, detectable] triples. */
  readonly runs: Int32Array;
}

/** Stock-out run days, as [start, end, detectable] triples, for the days of an array from `base`. */
function fillRuns(maskFrom: Int32Array, base: number, runs: ArrayLike<number>): void {
  for (let r = 0; r + 2 < runs.length; r += 3) {
    const a = Math.max(runs[r]! - base, 0);
    const b = Math.min(runs[r + 1]! - base, maskFrom.length - 1);
    if (b >= a) maskFrom.fill(runs[r + 2]!, a, b + 1);
  }
}

/** k* of a run starting at `start` (index into `units`), from its history as the rule reads it. */
function runKStar(
  units: ArrayLike<number>,
  flagged: (i: number) => boolean,
  start: number,
  firstSale: number,
  p: StockoutParams,
): number {
  let cnt = 0;
  let sum = 0;
  let sumSq = 0;
  for (let i = Math.max(start - p.lookback, firstSale, 0); i < start; i++) {
    const v = units[i] as number;
    if (Number.isNaN(v) || flagged(i)) continue;
    cnt++;
    sum += v;
    sumSq += v * v;
  }
  if (cnt < p.minHistory) return Number.POSITIVE_INFINITY;
  // The same expressions as classifyZeroRuns: exact integer sums, then one rounding each.
  const mean = sum / cnt;
  const variance = cnt > 1 ? Math.max(0, (sumSq - (sum * sum) / cnt) / (cnt - 1)) : 0;
  return criticalRunLength(zeroProbability(mean, variance), p.alpha);
}

/**
 * The state at `cutoff` of a series whose units are dense from `base` (at least through the
 * cutoff) and whose mask `stockoutMask` computed at that cutoff. Stock-out runs ending before
 * `keepFrom` are left out (the next refresh reads no day before it).
 */
export function stockoutStateOf(
  base: number,
  units: Float64Array,
  mask: StockoutMask | null,
  cutoff: number,
  keepFrom: number,
  params: StockoutParams = DEFAULT_STOCKOUT_PARAMS,
): StockoutState {
  const n = Math.min(units.length, cutoff - base + 1);
  let first = -1;
  for (let i = 0; i < n; i++) {
    if (units[i]! > 0) {
      first = i;
      break;
    }
  }
  let open = n;
  while (open > 0 && units[open - 1] === 0) open--;
  const maskFrom = mask?.maskFrom ?? null;
  const flagged = (i: number) => maskFrom !== null && maskFrom[i]! !== NEVER;
  let openKStar = Number.POSITIVE_INFINITY;
  if (open < n && first >= 0 && open >= first) openKStar = runKStar(units, flagged, open, first, params);
  const runs: number[] = [];
  if (maskFrom !== null) {
    let i = Math.max(0, keepFrom - base);
    // A run that started before keepFrom but ends inside the kept span is kept whole.
    while (i > 0 && i < open && maskFrom[i]! !== NEVER && maskFrom[i - 1] === maskFrom[i]) i--;
    while (i < open) {
      if (maskFrom[i] === NEVER) {
        i++;
        continue;
      }
      const det = maskFrom[i]!;
      const s = i;
      while (i < open && maskFrom[i] === det) i++;
      runs.push(base + s, base + i - 1, det);
    }
  }
  return {
    cutoff,
    firstSale: first < 0 ? null : base + first,
    openStart: open < n ? base + open : null,
    openKStar,
    runs: Int32Array.from(runs),
  };
}

/**
 * The mask at `cutoff` from the state at an earlier cutoff P and the units of the days from
 * `base` through `cutoff` (`base` at most P + 1 - lookback, and no later than any day the
 * caller reads the mask for): exactly `stockoutMask` over the whole history, on those days.
 * Returns the mask (null when nothing is masked on them) and the state at `cutoff`.
 */
export function resumeStockoutMask(
  state: StockoutState,
  base: number,
  units: Float64Array,
  cutoff: number,
  keepFrom: number,
  params: StockoutParams = DEFAULT_STOCKOUT_PARAMS,
): { mask: StockoutMask | null; state: StockoutState } {
  const R = state.cutoff + 1;
  // History before `base` matters only after a sale before it.
  if (R - params.lookback < base && state.firstSale !== null && state.firstSale < base)
    throw new Error(
      `resumeStockoutMask: days from ${R - params.lookback} are needed, the units start on ${base}`,
    );
  const n = Math.min(units.length, cutoff - base + 1);
  const maskFrom = new Int32Array(units.length).fill(NEVER);
  fillRuns(maskFrom, base, state.runs);
  // Stock-out days (flagged): every masked day before R is one; after, those of closed stock-outs.
  const stock = new Uint8Array(units.length);
  for (let i = 0; i < Math.min(n, R - base); i++) if (maskFrom[i] !== NEVER) stock[i] = 1;
  // Index of the first sale (negative: before the array); null while there was none.
  let first: number | null = state.firstSale === null ? null : state.firstSale - base;
  if (first === null) {
    for (let i = Math.max(0, R - base); i < n; i++) {
      if (units[i]! > 0) {
        first = i;
        break;
      }
    }
  }
  const newRuns: number[] = [];
  const events = new Set<number>();
  for (let r = 2; r < state.runs.length; r += 3) events.add(state.runs[r]!);
  let masked = state.runs.length / 3;
  let openStart: number | null = null;
  let openKStar = Number.POSITIVE_INFINITY;
  const settle = (start: number, end: number, kStar: number) => {
    const isOpen = end === n - 1;
    const reached = end - start + 1 >= kStar;
    if (isOpen) {
      openStart = base + start;
      openKStar = kStar;
    }
    if (!reached) return;
    const det = base + start + kStar - 1;
    maskFrom.fill(det, Math.max(start, 0), end + 1);
    events.add(det);
    masked++;
    if (!isOpen) {
      for (let i = Math.max(start, 0); i <= end; i++) stock[i] = 1;
      newRuns.push(base + start, base + end, det);
    }
  };
  let i = Math.max(0, R - base);
  if (state.openStart !== null) {
    // The run open at P goes on through the new zero days; its k* was fixed by its history.
    while (i < n && units[i] === 0) i++;
    settle(state.openStart - base, i - 1, state.openKStar);
  }
  while (i < n) {
    if (units[i] !== 0) {
      i++;
      continue;
    }
    const start = i;
    while (i < n && units[i] === 0) i++;
    const end = i - 1;
    const judged = first !== null && start >= first;
    settle(
      start,
      end,
      judged ? runKStar(units, (k) => stock[k] === 1, start, first!, params) : Number.POSITIVE_INFINITY,
    );
  }
  const kept: number[] = [];
  for (let r = 0; r + 2 < state.runs.length; r += 3)
    if (state.runs[r + 1]! >= keepFrom) kept.push(state.runs[r]!, state.runs[r + 1]!, state.runs[r + 2]!);
  for (let r = 0; r + 2 < newRuns.length; r += 3)
    if (newRuns[r + 1]! >= keepFrom) kept.push(newRuns[r]!, newRuns[r + 1]!, newRuns[r + 2]!);
  let any = false;
  for (let k = 0; k < n && !any; k++) any = maskFrom[k] !== NEVER;
  return {
    mask: any ? { maskFrom, events: Int32Array.from(events).sort(), runs: masked } : null,
    state: {
      cutoff,
      firstSale: first === null ? null : base + first,
      openStart,
      openKStar,
      runs: Int32Array.from(kept),
    },
  };
}
