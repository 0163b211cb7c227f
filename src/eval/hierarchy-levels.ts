/**
 * The 12 aggregation levels of a retail hierarchy with regions, stores, categories, departments
 * and items, in the order of Makridakis, Spiliotis & Assimakopoulos, International Journal of
 * Forecasting 38(4), 2022 (level 1 = the total, level 12 = one item in one store).
 */
export type KeyColumn = 'region_id' | 'store_id' | 'category_id' | 'dept_id' | 'item_id';

export interface HierarchyLevel {
  readonly level: number;
  readonly name: string;
  /** The columns that name one series of the level (empty for the total). */
  readonly keys: readonly KeyColumn[];
}

export const HIERARCHY_LEVELS: readonly HierarchyLevel[] = Object.freeze(
  (
    [
      [1, 'total', []],
      [2, 'region', ['region_id']],
      [3, 'store', ['store_id']],
      [4, 'category', ['category_id']],
      [5, 'department', ['dept_id']],
      [6, 'region_category', ['region_id', 'category_id']],
      [7, 'region_department', ['region_id', 'dept_id']],
      [8, 'store_category', ['store_id', 'category_id']],
      [9, 'store_department', ['store_id', 'dept_id']],
      [10, 'item', ['item_id']],
      [11, 'item_region', ['item_id', 'region_id']],
      [12, 'item_store', ['item_id', 'store_id']],
    ] as const
  ).map(([level, name, keys]) => Object.freeze({ level, name, keys: Object.freeze([...keys]) })),
);

/** The bottom level: one series per item and store. */
export const BOTTOM_LEVEL = 12;

/** Separator of key parts: ids hold no control characters, so U+001F never occurs inside one. */
export const KEY_SEPARATOR = '\u001f';

/** A bottom series with its place in the hierarchy. */
export interface BottomSeries {
  readonly seriesId: number;
  readonly item_id: string;
  readonly store_id: string;
  readonly dept_id: string;
  readonly category_id: string;
  readonly region_id: string;
}

/** The key of the level series a bottom series belongs to ('' for the total). */
export function levelKey(level: HierarchyLevel, s: Readonly<Record<KeyColumn, string>>): string {
  return level.keys.map((k) => s[k]).join(KEY_SEPARATOR);
}

/** A key made readable: parts joined with '/', or '(total)'. */
export function displayKey(key: string): string {
  return key === '' ? '(total)' : key.split(KEY_SEPARATOR).join('/');
}

export interface LevelGrouping {
  readonly level: HierarchyLevel;
  /** Level series keys, sorted. */
  readonly keys: readonly string[];
  /** For each bottom series (by index), the index of its level series. */
  readonly groupOf: Int32Array;
}

/** Maps bottom series to the series of one level. */
export function groupBottom(level: HierarchyLevel, bottom: readonly BottomSeries[]): LevelGrouping {
  const keyOfBottom = bottom.map((s) => levelKey(level, s));
  const keys = [...new Set(keyOfBottom)].sort();
  const index = new Map(keys.map((k, i) => [k, i]));
  const groupOf = Int32Array.from(keyOfBottom, (k) => index.get(k)!);
  return { level, keys, groupOf };
}

/**
 * Bottom-up sums: `values` holds `h` values per bottom series (row-major), the result `h` per
 * level series. NaN propagates, so a missing bottom value cannot hide inside an aggregate.
 */
export function aggregateBottomUp(
  values: Float64Array,
  groupOf: Int32Array,
  groups: number,
  h: number,
): Float64Array {
  if (values.length !== groupOf.length * h)
    throw new RangeError('values must hold h values per bottom series');
  const out = new Float64Array(groups * h);
  for (let s = 0; s < groupOf.length; s++) {
    const g = groupOf[s]! * h;
    const base = s * h;
    for (let j = 0; j < h; j++) out[g + j]! += values[base + j]!;
  }
  return out;
}
