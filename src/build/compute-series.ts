import type { PartitionEnv, SeriesInput } from '../features/family.js';
import type { ResolvedFeatureSet } from '../features/feature-set.js';

/**
 * Every feature column of a set for one series' rows, in catalogue order: pure (typed arrays
 * in, typed arrays out). The build, the audit and the tests all compute through this.
 */
export function computeSeriesFeatures(
  set: ResolvedFeatureSet,
  input: SeriesInput,
  env: PartitionEnv,
): Float64Array[] {
  const cols: Float64Array[] = [];
  for (const f of set.families) {
    const out = f.columns.map(() => new Float64Array(input.rows.n));
    f.family.compute(f.params, set.shape, input, env, out);
    for (const c of out) cols.push(c);
  }
  return cols;
}
