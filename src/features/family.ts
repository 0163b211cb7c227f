import type { z } from 'zod';
import type { GroupLevel } from './group-levels.js';

/** The six kinds of feature (DESIGN.md vocabulary). */
export const FAMILY_NAMES = ['lags', 'windows', 'calendar', 'prices', 'encodings', 'hierarchy'] as const;
export type FamilyName = (typeof FAMILY_NAMES)[number];

export type BuildMode = 'shift' | 'origin';

/** What the family compute code needs to know about the set it belongs to. */
export interface SetShape {
  readonly horizon: number;
  readonly mode: BuildMode;
}

/**
 * One feature column as declared by its family. `source` and `shift` state what the cell may
 * depend on; the leak audit holds every cell to exactly this declaration.
 */
export interface FeatureColumn {
  readonly name: string;
  readonly family: FamilyName;
  readonly description: string;
  /** `sales` cells read units up to their boundary; `prices` read prices; `calendar` neither. */
  readonly source: 'sales' | 'prices' | 'calendar';
  /** For sales cells: the gap g, so the boundary is min(limit, anchor - g). */
  readonly shift: number;
}

/** What a family reads, so the build fetches exactly that much history and no more. */
export interface FamilyNeeds {
  readonly sales: boolean;
  /** Oldest sales day read, as days before the anchor: max over its cells of gap + window - 1. */
  readonly salesReach: number;
  /** The same for group totals. */
  readonly groupReach: number;
  readonly levels: readonly GroupLevel[];
  readonly prices: boolean;
  readonly calendar: boolean;
}

/** Needs of a family that reads nothing. */
export const NO_NEEDS: FamilyNeeds = Object.freeze({
  sales: false,
  salesReach: 0,
  groupReach: 0,
  levels: [],
  prices: false,
  calendar: false,
});

/**
 * The rows of one series to be filled, in output order. `anchor` is the day sales-derived
 * features are measured from (t in shift mode, o + 1 in origin mode) and `limit` the newest
 * day a cell may ever see (C in shift mode, o in origin mode): a cell with gap g has the
 * boundary min(limit, anchor - g).
 */
export interface RowSet {
  readonly n: number;
  readonly day: Int32Array;
  readonly anchor: Int32Array;
  readonly limit: Int32Array;
}

/**
 * One series as the feature code sees it. `units` is dense from `base` (index = day - base),
 * NaN where there is no sales row or the day is past the cutoff. `maskFrom[i]` is the first
 * boundary from which day `base + i` counts as missing (a stock-out mask); 2^31-1 = never.
 * `maskEvents` lists the distinct finite `maskFrom` values in ascending order.
 */
export interface SeriesInput {
  readonly seriesId: number;
  readonly cutoff: number;
  readonly base: number;
  readonly units: Float64Array;
  readonly maskFrom: Int32Array | null;
  readonly maskEvents: Int32Array | null;
  readonly rows: RowSet;
  /** Group key of the series at each level (null when the hierarchy does not place it). */
  readonly keys: Readonly<Record<GroupLevel, string | null>>;
  /** The item, for prices. */
  readonly itemId: string;
}

/** Daily totals of one group: `total[i]` units and `n[i]` member rows on day `base + i`. */
export interface GroupSeries {
  readonly base: number;
  readonly total: Float64Array;
  readonly n: Float64Array;
}

/** Weekly prices of one item in the partition's store, ascending by week. */
export interface ItemPrices {
  readonly weeks: Int32Array;
  readonly prices: Float64Array;
}

/** Per-day calendar values for the partition's store (region), from `base`. */
export interface CalendarTable {
  readonly base: number;
  readonly columns: ReadonlyMap<string, Float64Array>;
}

/**
 * Everything shared by the series of one partition, prepared by the build's I/O code. Families
 * only read it (plus `cache`, where they keep values shared by several series of the partition).
 */
export interface PartitionEnv {
  readonly cutoff: number;
  /** Newest week start a price may come from (C, or C + H when prices are known ahead). */
  readonly priceBoundary: number;
  /** Day of week retail weeks start on: 0 = Sunday ... 6 = Saturday. */
  readonly weekStart: number;
  /** The partition's range of anchor days, so values shared by its series are computed once. */
  readonly anchorLo: number;
  readonly anchorHi: number;
  readonly calendar: CalendarTable | null;
  readonly prices: ReadonlyMap<string, ItemPrices> | null;
  /** Per department and week: price in ten-thousandths -> number of the store's items at it. */
  readonly deptPrices: ReadonlyMap<string, ReadonlyMap<number, ReadonlyMap<number, number>>> | null;
  /** Per department and week: the mean price of the store's items. */
  readonly deptMeans: ReadonlyMap<string, ReadonlyMap<number, number>> | null;
  readonly departmentOf: ReadonlyMap<string, string | null> | null;
  group(level: GroupLevel, key: string | null): GroupSeries | null;
  readonly cache: Map<string, unknown>;
}

/**
 * A feature family: parameters validated by `params`, the columns they produce, what history
 * they need, and the pure computation (typed arrays in, typed arrays out, no I/O).
 */
export interface FeatureFamily<P> {
  readonly name: FamilyName;
  readonly params: z.ZodType<P>;
  columns(params: P, set: SetShape): FeatureColumn[];
  needs(params: P, set: SetShape): FamilyNeeds;
  /** Fills `out[c][r]` for every column c of `columns(params, set)` and row r of `series.rows`. */
  compute(params: P, set: SetShape, series: SeriesInput, env: PartitionEnv, out: Float64Array[]): void;
}

/** Freezes a family definition (one per file under src/features/). */
export function defineFamily<P>(family: FeatureFamily<P>): FeatureFamily<P> {
  return Object.freeze(family);
}

/** Boundary of a sales cell with gap g on row r: min(limit, anchor - g). */
export function cellBoundary(rows: RowSet, r: number, gap: number): number {
  const a = rows.anchor[r]! - gap;
  const l = rows.limit[r]!;
  return Math.min(a, l);
}

/** The largest int4, used as "never" in masks. */
export const NEVER = 2147483647;
