/**
 * The raw-table contracts the loader fills (DESIGN.md, "Data contracts"): which columns each
 * input file has, what kind of value each holds, and which of them form the key.
 */
export const LOAD_TARGETS = [
  'items',
  'stores',
  'calendar',
  'events',
  'benefit_days',
  'prices',
  'sales',
] as const;
/** One input file kind; also the order files load in (hierarchy first, sales last). */
export type LoadTarget = (typeof LOAD_TARGETS)[number];

export type Layout = 'long' | 'wide';
export type LoadMode = 'append' | 'replace';

/**
 * `id`: a required id. `attr`: an optional id (an empty cell is stored as NULL).
 * `name`: a required text of up to 256 characters. `day`: an ISO 8601 day. `units`: int4.
 * `price`: numeric(14, 4).
 */
export type ColumnKind = 'id' | 'attr' | 'name' | 'day' | 'units' | 'price';

export interface ColumnSpec {
  readonly name: string;
  readonly kind: ColumnKind;
  /** Part of the table's primary key. */
  readonly inKey: boolean;
}

export interface TargetSpec {
  readonly target: LoadTarget;
  readonly table: string;
  /** Contract columns in table order (sales: the long layout). */
  readonly columns: readonly ColumnSpec[];
  /** Key columns whose values `replace` matches on (events: the day, so a day's events are replaced whole). */
  readonly replaceBy: readonly string[];
  /** The column giving first_day/last_day of a batch. */
  readonly dayColumn?: string;
}

const col = (name: string, kind: ColumnKind, inKey = false): ColumnSpec =>
  Object.freeze({ name, kind, inKey });

const spec = (s: TargetSpec): TargetSpec => Object.freeze(s);

export const TARGETS: Readonly<Record<LoadTarget, TargetSpec>> = Object.freeze({
  items: spec({
    target: 'items',
    table: 'items',
    columns: [col('item_id', 'id', true), col('dept_id', 'attr'), col('category_id', 'attr')],
    replaceBy: ['item_id'],
  }),
  stores: spec({
    target: 'stores',
    table: 'stores',
    columns: [col('store_id', 'id', true), col('region_id', 'attr')],
    replaceBy: ['store_id'],
  }),
  calendar: spec({
    target: 'calendar',
    table: 'calendar_days',
    columns: [col('day', 'day', true)],
    replaceBy: ['day'],
    dayColumn: 'day',
  }),
  events: spec({
    target: 'events',
    table: 'events',
    columns: [col('day', 'day', true), col('name', 'name', true), col('kind', 'id')],
    replaceBy: ['day'],
    dayColumn: 'day',
  }),
  benefit_days: spec({
    target: 'benefit_days',
    table: 'benefit_days',
    columns: [col('region_id', 'id', true), col('day', 'day', true)],
    replaceBy: ['region_id', 'day'],
    dayColumn: 'day',
  }),
  prices: spec({
    target: 'prices',
    table: 'prices',
    columns: [
      col('item_id', 'id', true),
      col('store_id', 'id', true),
      col('week_start', 'day', true),
      col('price', 'price'),
    ],
    replaceBy: ['item_id', 'store_id', 'week_start'],
    dayColumn: 'week_start',
  }),
  sales: spec({
    target: 'sales',
    table: 'sales',
    columns: [
      col('item_id', 'id', true),
      col('store_id', 'id', true),
      col('day', 'day', true),
      col('units', 'units'),
    ],
    replaceBy: ['item_id', 'store_id', 'day'],
    dayColumn: 'day',
  }),
});

export const keyColumns = (s: TargetSpec): readonly ColumnSpec[] => s.columns.filter((c) => c.inKey);
