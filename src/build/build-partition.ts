import type { Config } from '../config/config.js';
import { parseDay } from '../core/days.js';
import { type Db, type DbSession, quoteIdent } from '../db/database.js';
import { LarderError, UsageError } from '../db/errors.js';
import { calendarTable } from '../features/calendar.js';
import { departmentMeans } from '../features/prices.js';
import type { GroupSeries, PartitionEnv, SeriesInput } from '../features/family.js';
import type { ResolvedFeatureSet } from '../features/feature-set.js';
import type { GroupLevel } from '../features/group-levels.js';
import { stockoutMask } from '../features/stockout-mask.js';
import { type StockoutState, stockoutStateOf } from '../features/stockout-state.js';
import { type BuildPlan, planFeatureSet } from './build-plan.js';
import { computeSeriesFeatures, featureScratch } from './compute-series.js';
import type { SalesChecksum } from './fingerprint.js';
import { type GroupMap, readStagedGroups } from './group-stage.js';
import {
  type PartitionSeries,
  readCalendarInputs,
  readDepartments,
  readPartitionPrices,
  readPartitionSales,
  readPartitionSeries,
  type StorePrices,
  storeGroups,
} from './partition-input.js';
import { type RowLayout, seriesRows, trainingOrigins } from './series-rows.js';
import { SnapshotEncoder } from './snapshot-encoder.js';
import { keepsStockoutStates, refreshReach, writeStockoutStates } from './stockout-states.js';

export interface PartitionResult {
  readonly partition: string;
  readonly rowCount: number;
  readonly trainRows: number;
  readonly predictRows: number;
  readonly inputRows: number;
  readonly timings: {
    readonly readMs: number;
    readonly computeMs: number;
    readonly writeMs: number;
    readonly totalMs: number;
  };
}

export interface PartitionOptions {
  /** Tests and the audit only: accept a plan of an unsafe (deliberately leaky) set. */
  readonly allowUnsafe?: boolean;
  /**
   * The partition's inputs, already read for this plan by the same process (an in-process
   * build reads every partition before computing any; see `buildSnapshot`).
   */
  readonly data?: PartitionData;
}

const day = (s: string) => parseDay(s)!;

/**
 * Everything one partition's computation needs, read from the database. Exported (with
 * `readPartition`) for the job runner's incremental refresh, which reads a partition for a
 * narrower window of anchor days and computes only the rows a new day can change.
 */
export interface PartitionData {
  readonly series: PartitionSeries[];
  readonly base: number;
  readonly env: PartitionEnv;
  readonly inputRows: number;
  /** Milliseconds per input read. */
  readonly reads: Record<string, number>;
}

export interface ReadPartitionOptions {
  /**
   * Chain-wide group totals held in this process (an in-process build sums them from every
   * partition's reads; see `buildSnapshot`), looked up when the partition computes, so the map
   * may still be filling while other partitions are read. Without it they are read from the
   * plan's staged table.
   */
  readonly chainGroups?: GroupMap;
  /** Takes every sales row read (the in-process build's fingerprint of the sales). */
  readonly salesChecksum?: SalesChecksum;
  /**
   * The first day of each of the store's series from elsewhere than a probe of `sales` per series
   * (the checks' blocks: `readStoreFirstDays`); null: probe `sales`.
   */
  readonly firstDays?: (store: string, cutoff: number) => Promise<ReadonlyMap<number, number> | null>;
  /** The store's sales from elsewhere than `sales` (the checks' blocks: `readStoreSales`). */
  readonly storeSales?: (
    store: string,
    series: readonly PartitionSeries[],
    base: number,
    cutoff: number,
  ) => Promise<number>;
  /**
   * The store's prices from elsewhere than a range scan of `prices`: read for every store at
   * once (`readChainPrices`), or from the checks' copy (`readStorePricesFromCopy`).
   */
  readonly storePrices?: (
    store: string,
    departmentOf: ReadonlyMap<string, string | null>,
  ) => Promise<StorePrices>;
}

/**
 * Reads one partition's inputs for a plan: its series with dense units, group totals, prices and
 * calendar, ready for `computeSeriesFeatures` (the build and the job runner's refresh use it).
 */
export async function readPartition(
  s: DbSession,
  plan: BuildPlan,
  set: ResolvedFeatureSet,
  store: string,
  opts: ReadPartitionOptions = {},
): Promise<PartitionData> {
  const C = day(plan.cutoff);
  const reads: Record<string, number> = {};
  let tr = performance.now();
  const lap = (name: string) => {
    const now = performance.now();
    reads[name] = Math.round(now - tr);
    tr = now;
  };
  const series = await readPartitionSeries(s, store, C, (await opts.firstDays?.(store, C)) ?? undefined);
  lap('seriesMs');
  const base =
    plan.salesFrom !== null ? day(plan.salesFrom) : series.reduce((m, x) => Math.min(m, x.firstDay), C);
  const inputRows = opts.storeSales
    ? await opts.storeSales(store, series, base, C)
    : await readPartitionSales(s, store, series, base, C, opts.salesChecksum);
  lap('salesMs');
  const groupFrom = day(plan.groupFrom);
  const groups = storeGroups(series, plan.storeLevels, base, groupFrom, C) as Map<
    GroupLevel,
    Map<string, GroupSeries>
  >;
  const chain = opts.chainGroups ?? null;
  if (chain === null && plan.chainLevels.length && !plan.groupTable) {
    throw new LarderError(
      'PLAN_IN_PROCESS',
      'this plan keeps its chain-wide group totals in the process that planned it: plan the build again',
    );
  }
  if (chain === null && plan.groupTable && plan.chainLevels.length) {
    const wanted = new Map<GroupLevel, Set<string>>();
    for (const level of plan.chainLevels) {
      const keys = new Set<string>();
      for (const x of series) if (x.keys[level] !== null) keys.add(x.keys[level]!);
      wanted.set(level, keys);
    }
    await readStagedGroups(s, plan.groupTable, wanted, groupFrom, C, groups);
  }
  lap('groupsMs');
  const needs = set.families.map((f) => f.family.needs(f.params, set.shape));
  let prices: PartitionEnv['prices'] = null;
  let deptPrices: PartitionEnv['deptPrices'] = null;
  let deptMeans: PartitionEnv['deptMeans'] = null;
  let departmentOf: PartitionEnv['departmentOf'] = null;
  if (needs.some((n) => n.prices)) {
    departmentOf = await readDepartments(s);
    const p = opts.storePrices
      ? await opts.storePrices(store, departmentOf)
      : await readPartitionPrices(s, store, day(plan.priceBoundary), departmentOf);
    prices = p.prices;
    deptPrices = p.deptPrices;
    deptMeans = departmentMeans(p.deptPrices);
    lap('pricesMs');
  }
  const anchorLo = day(plan.anchorLo);
  const anchorHi = day(plan.anchorHi);
  let calendar: PartitionEnv['calendar'] = null;
  if (needs.some((n) => n.calendar)) {
    const regionId = series[0]?.hierarchy.regionId ?? null;
    const { events, benefit } = await readCalendarInputs(s, regionId);
    const kinds = set.definition.families.calendar?.eventKinds ?? [];
    calendar = calendarTable(anchorLo - 1, C + set.shape.horizon, events, benefit, plan.codes, kinds);
    lap('calendarMs');
  }
  const env: PartitionEnv = {
    cutoff: C,
    priceBoundary: day(plan.priceBoundary),
    weekStart: set.weekStart,
    anchorLo,
    anchorHi,
    calendar,
    prices,
    deptPrices,
    deptMeans,
    departmentOf,
    group: (level, key) =>
      key === null ? null : (groups.get(level)?.get(key) ?? chain?.get(level)?.get(key) ?? null),
    cache: new Map(),
  };
  return { series, base, env, inputRows, reads };
}

/** Streams the partition's snapshot rows as binary COPY chunks, series by series. */
async function* snapshotRows(
  plan: BuildPlan,
  set: ResolvedFeatureSet,
  data: PartitionData,
  counts: { rows: number; train: number; computeMs: number },
  states: Array<{ seriesId: number; state: StockoutState }> | null,
): AsyncGenerator<Uint8Array> {
  const C = day(plan.cutoff);
  const layout: RowLayout = {
    mode: set.shape.mode,
    cutoff: C,
    horizon: set.shape.horizon,
    from: day(plan.from),
    origins:
      set.shape.mode === 'origin'
        ? trainingOrigins(C, day(plan.from), set.definition.originEvery)
        : new Int32Array(0),
  };
  const F = set.columns.length;
  const w = new SnapshotEncoder(F);
  const maxRows =
    set.shape.horizon +
    (layout.mode === 'shift' ? C - layout.from + 1 : layout.origins.length * set.shape.horizon);
  const scratch = featureScratch(set, maxRows);
  const keepFrom = C + 1 - refreshReach(set);
  for (const x of data.series) {
    const t0 = performance.now();
    const rows = seriesRows(layout, data.base, x.units);
    const mask = set.stockout ? stockoutMask(data.base, x.units, C, set.stockout) : null;
    // The rule's state at C lets the next incremental refresh read only the newest days.
    if (states && set.stockout)
      states.push({
        seriesId: x.seriesId,
        state: stockoutStateOf(data.base, x.units, mask, C, keepFrom, set.stockout),
      });
    const input: SeriesInput = {
      seriesId: x.seriesId,
      cutoff: C,
      base: data.base,
      units: x.units,
      maskFrom: mask?.maskFrom ?? null,
      maskEvents: mask?.events ?? null,
      rows,
      keys: x.keys,
      itemId: x.hierarchy.itemId,
    };
    const cols = computeSeriesFeatures(set, input, data.env, scratch);
    w.series(x.seriesId, rows, cols);
    counts.rows += rows.n;
    counts.train += rows.trainRows;
    // Free the series' input once written; a store's rows are otherwise all held to the end.
    x.units = new Float64Array(0);
    counts.computeMs += performance.now() - t0;
    for (const chunk of w.take()) yield chunk;
  }
  for (const chunk of w.end()) yield chunk;
}

/**
 * Builds one partition (a store) into the plan's staging table, in one transaction together
 * with its completion record. Idempotent: a partition that already completed has its rows
 * replaced; one whose worker died mid-way left nothing (its transaction rolled back).
 */
export async function buildPartition(
  db: Db,
  _config: Config,
  plan: BuildPlan,
  partition: string,
  opts: PartitionOptions = {},
): Promise<PartitionResult> {
  if (!plan.partitions.includes(partition))
    throw new UsageError(`partition '${partition}' is not part of this build`);
  if (plan.unsafe && !opts.allowUnsafe)
    throw new LarderError('UNSAFE_PLAN', 'this plan builds an unvalidated feature set');
  const set = planFeatureSet(plan);
  if (set.definitionHash !== plan.definitionHash) {
    throw new LarderError(
      'PLAN_MISMATCH',
      `the feature code gives definition hash ${set.definitionHash}, the plan ${plan.definitionHash}: replan the build`,
    );
  }
  const table = quoteIdent(plan.stagingTable);
  const t0 = performance.now();
  return db.transaction(async (tx) => {
    await tx.query('SELECT pg_advisory_xact_lock(hashtext($1))', [
      `larder.build.part.${plan.stagingTable}.${partition}`,
    ]);
    const build = await tx.query(
      'SELECT 1 FROM snapshot_builds WHERE table_name = $1 AND finished_at IS NULL FOR SHARE',
      [plan.stagingTable],
    );
    if (build.rows.length === 0) {
      throw new LarderError('BUILD_GONE', `build ${plan.stagingTable} is finished, aborted or superseded`);
    }
    const done = await tx.query(
      'SELECT 1 FROM snapshot_build_parts WHERE table_name = $1 AND partition = $2',
      [plan.stagingTable, partition],
    );
    if (done.rows.length) {
      await tx.query(
        `DELETE FROM ${table} WHERE series_id IN (SELECT series_id FROM series WHERE store_id = $1)`,
        [partition],
      );
      await tx.query('DELETE FROM snapshot_build_parts WHERE table_name = $1 AND partition = $2', [
        plan.stagingTable,
        partition,
      ]);
    }
    // The build's statements are index range scans and COPYs: JIT compilation (100-180 ms a
    // statement, measured) buys nothing here.
    await tx.exec('SET LOCAL jit = off');
    const data = opts.data ?? (await readPartition(tx, plan, set, partition));
    const readMs = opts.data
      ? Object.values(opts.data.reads).reduce((a, b) => a + b, 0)
      : performance.now() - t0;
    const counts = { rows: 0, train: 0, computeMs: 0 };
    const states = keepsStockoutStates(set) ? [] : null;
    const t1 = performance.now();
    const copied = await tx.copyFrom(
      `COPY ${table} FROM STDIN (FORMAT binary)`,
      snapshotRows(plan, set, data, counts, states),
    );
    if (states) await writeStockoutStates(tx, plan.stagingTable, partition, states);
    const copyMs = performance.now() - t1;
    if (copied !== counts.rows) {
      throw new LarderError(
        'COPY_COUNT',
        `partition ${partition}: wrote ${counts.rows} rows, the server stored ${copied}`,
      );
    }
    const timings = {
      ...data.reads,
      readMs: Math.round(readMs),
      computeMs: Math.round(counts.computeMs),
      writeMs: Math.round(copyMs - counts.computeMs),
      totalMs: Math.round(performance.now() - t0),
    };
    const result: PartitionResult = {
      partition,
      rowCount: counts.rows,
      trainRows: counts.train,
      predictRows: counts.rows - counts.train,
      inputRows: data.inputRows,
      timings,
    };
    await tx.query(
      `INSERT INTO snapshot_build_parts (table_name, partition, row_count, train_rows, predict_rows, timings)
       VALUES ($1, $2, $3, $4, $5, $6)`,
      [
        plan.stagingTable,
        partition,
        result.rowCount,
        result.trainRows,
        result.predictRows,
        JSON.stringify(timings),
      ],
    );
    return result;
  });
}
