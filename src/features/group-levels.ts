/**
 * The levels series are grouped at, for encodings and hierarchy features. A level is either
 * inside one store (computed by the store's partition from its own rows) or spans stores
 * (summed once per build in one streaming pass over the sales and read back by each partition).
 */
export const GROUP_LEVELS = [
  'total',
  'region',
  'store',
  'category',
  'department',
  'item',
  'store_category',
  'store_department',
  'item_region',
] as const;
export type GroupLevel = (typeof GROUP_LEVELS)[number];

export interface LevelInfo {
  readonly level: GroupLevel;
  /** `store` levels group only series of one store. */
  readonly scope: 'store' | 'chain';
  /** The enclosing level whose mean is the encoding's prior. */
  readonly parent: GroupLevel | null;
  readonly description: string;
}

export const LEVELS: Readonly<Record<GroupLevel, LevelInfo>> = Object.freeze({
  total: {
    level: 'total',
    scope: 'chain',
    parent: null,
    description: 'the whole chain',
  },
  region: {
    level: 'region',
    scope: 'chain',
    parent: 'total',
    description: 'the region',
  },
  store: { level: 'store', scope: 'store', parent: 'region', description: 'the store' },
  category: {
    level: 'category',
    scope: 'chain',
    parent: 'total',
    description: 'the category',
  },
  department: {
    level: 'department',
    scope: 'chain',
    parent: 'category',
    description: 'the department',
  },
  item: {
    level: 'item',
    scope: 'chain',
    parent: 'department',
    description: 'the item across stores',
  },
  store_category: {
    level: 'store_category',
    scope: 'store',
    parent: 'store',
    description: 'the category in the store',
  },
  store_department: {
    level: 'store_department',
    scope: 'store',
    parent: 'store_category',
    description: 'the department in the store',
  },
  item_region: {
    level: 'item_region',
    scope: 'chain',
    parent: 'item',
    description: 'the item across the stores of its region',
  },
});

/** The hierarchy of one series, as stored in `series`, `items` and `stores`. */
export interface SeriesHierarchy {
  readonly itemId: string;
  readonly storeId: string;
  readonly deptId: string | null;
  readonly categoryId: string | null;
  readonly regionId: string | null;
}

/** Separates the parts of a composite key; ids never contain control characters (DESIGN.md). */
export const KEY_SEP = '\u001f';

/** Group key of a series at a level, or null when a part of it is unknown. */
export function groupKey(level: GroupLevel, h: SeriesHierarchy): string | null {
  const join = (...parts: Array<string | null>) =>
    parts.some((p) => p === null) ? null : parts.join(KEY_SEP);
  switch (level) {
    case 'total':
      return '';
    case 'region':
      return h.regionId;
    case 'store':
      return h.storeId;
    case 'category':
      return h.categoryId;
    case 'department':
      return h.deptId;
    case 'item':
      return h.itemId;
    case 'store_category':
      return join(h.storeId, h.categoryId);
    case 'store_department':
      return join(h.storeId, h.deptId);
    case 'item_region':
      return join(h.itemId, h.regionId);
  }
}

/** Keys of a series at every level. */
export function groupKeys(h: SeriesHierarchy): Record<GroupLevel, string | null> {
  const out = {} as Record<GroupLevel, string | null>;
  for (const l of GROUP_LEVELS) out[l] = groupKey(l, h);
  return out;
}
