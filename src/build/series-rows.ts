import type { BuildMode, RowSet } from '../features/family.js';

/** How rows are laid out for every series of a build. */
export interface RowLayout {
  readonly mode: BuildMode;
  readonly cutoff: number;
  readonly horizon: number;
  /** Shift mode: the first training day. */
  readonly from: number;
  /** Origin mode: training origins, ascending, all before the cutoff (the cutoff is the prediction origin). */
  readonly origins: Int32Array;
  /**
   * Shift mode: the first prediction day emitted (default C + 1). An incremental refresh that
   * keeps the previous snapshot's prediction rows C+1 .. P+H computes only the days after them.
   */
  readonly predictFrom?: number;
}

/** The rows of one series with their keys and labels. */
export interface SeriesRows extends RowSet {
  readonly origin: Int32Array | null;
  readonly isPredict: Uint8Array;
  /** Units at t for training rows; NaN for prediction rows. */
  readonly label: Float64Array;
  readonly trainRows: number;
}

/** Training origins o = C - k * every (k >= 1) with o >= from, ascending. */
export function trainingOrigins(cutoff: number, from: number, every: number): Int32Array {
  const out: number[] = [];
  for (let o = cutoff - every; o >= from; o -= every) out.push(o);
  return Int32Array.from(out.reverse());
}

/**
 * Rows of one series in (origin, day) order. Training rows are the days with a sales row (the
 * label is known); prediction rows are exactly H: C+1 .. C+H (origin mode: origin C), unless a
 * refresh asks only for those from `predictFrom` on.
 * `units` is dense from `base`, NaN where there is no row.
 */
export function seriesRows(layout: RowLayout, base: number, units: Float64Array): SeriesRows {
  const { cutoff: C, horizon: H } = layout;
  const has = (t: number) => {
    const i = t - base;
    return i >= 0 && i < units.length && !Number.isNaN(units[i]!);
  };
  // Count first, then fill typed arrays: no intermediate JS arrays on the build's hot path.
  let train = 0;
  if (layout.mode === 'shift') {
    for (let t = layout.from; t <= C; t++) if (has(t)) train++;
  } else {
    for (const o of layout.origins) for (let h = 1; h <= H && o + h <= C; h++) if (has(o + h)) train++;
  }
  // Prediction days emitted: C+1 .. C+H, or from `predictFrom` on (shift mode).
  const p0 = layout.mode === 'shift' ? Math.max(C + 1, layout.predictFrom ?? C + 1) : C + 1;
  const n = train + (layout.mode === 'shift' ? Math.max(0, C + H - p0 + 1) : H);
  const day = new Int32Array(n);
  const anchor = new Int32Array(n);
  const limit = new Int32Array(n);
  const label = new Float64Array(n);
  const origin = layout.mode === 'origin' ? new Int32Array(n) : null;
  let r = 0;
  if (origin === null) {
    for (let t = layout.from; t <= C; t++) {
      if (!has(t)) continue;
      day[r] = t;
      label[r++] = units[t - base]!;
    }
    for (let t = p0; t <= C + H; t++) {
      day[r] = t;
      label[r++] = Number.NaN;
    }
    anchor.set(day);
    limit.fill(C);
  } else {
    for (const o of layout.origins) {
      for (let h = 1; h <= H && o + h <= C; h++) {
        const t = o + h;
        if (!has(t)) continue;
        day[r] = t;
        origin[r] = o;
        label[r++] = units[t - base]!;
      }
    }
    for (let h = 1; h <= H; h++) {
      day[r] = C + h;
      origin[r] = C;
      label[r++] = Number.NaN;
    }
    for (let i = 0; i < n; i++) {
      anchor[i] = origin[i]! + 1;
      limit[i] = origin[i]!;
    }
  }
  const isPredict = new Uint8Array(n);
  isPredict.fill(1, train);
  return { n, day, anchor, limit, origin, isPredict, label, trainRows: train };
}
