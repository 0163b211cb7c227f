import type { PartitionEnv, SeriesInput } from '../features/family.js';
import type { ResolvedFeatureSet } from '../features/feature-set.js';

/**
 * Every feature column of a set for one series' rows, in catalogue order: pure (typed arrays
 * in, typed arrays out). The build, the audit and the tests all compute through this. With
 * `scratch` (see `featureScratch`) the columns are views of those buffers, reused from series
 * to series: the caller must be done with one series' columns before computing the next.
 */
export function computeSeriesFeatures(
  set: ResolvedFeatureSet,
  input: SeriesInput,
  env: PartitionEnv,
  scratch?: readonly Float64Array[],
): Float64Array[] {
  const n = input.rows.n;
  const cols: Float64Array[] = [];
  let k = 0;
  for (const f of set.families) {
    const out = f.columns.map(() => {
      const buf = scratch?.[k++];
      return buf && buf.length >= n ? buf.subarray(0, n) : new Float64Array(n);
    });
    f.family.compute(f.params, set.shape, input, env, out);
    for (const c of out) cols.push(c);
  }
  return cols;
}

/** Column buffers for `computeSeriesFeatures`, for series of up to `rows` rows. */
export function featureScratch(set: ResolvedFeatureSet, rows: number): Float64Array[] {
  return set.columns.map(() => new Float64Array(rows));
}
