import { randomBytes } from 'node:crypto';
import { availableParallelism } from 'node:os';
import { type BuildPlan, buildWindow, planFeatureSet, snapshotTableDdl } from '../build/build-plan.js';
import { type PartitionData, readPartition } from '../build/build-partition.js';
import { readPartitionPrices } from '../build/partition-input.js';
import { readStoreFirstDays, readStorePricesFromCopy, readStoreSales } from '../build/copy-input.js';
import {
  hasStockoutStates,
  keepsStockoutStates,
  moveStockoutStates,
  readStockoutStates,
  refreshReach,
  writeStockoutStates,
} from '../build/stockout-states.js';
import { computeSeriesFeatures } from '../build/compute-series.js';
import { dataFingerprint } from '../build/fingerprint.js';
import { stageChainGroups } from '../build/chain-groups.js';
import { type RowLayout, seriesRows } from '../build/series-rows.js';
import type { Config } from '../config/config.js';
import { formatDay, parseDay } from '../core/days.js';
import { CopyBinaryWriter } from '../db/binary-copy.js';
import { type Db, type DbSession, quoteIdent, safeIdent } from '../db/database.js';
import { LarderError } from '../db/errors.js';
import { calendarCodes } from '../features/calendar.js';
import type { SeriesInput } from '../features/family.js';
import { type ResolvedFeatureSet, resolveFeatureSet } from '../features/feature-set.js';
import { weekStartOf } from '../features/prices.js';
import { stockoutMask } from '../features/stockout-mask.js';
import { resumeStockoutMask, type StockoutState, stockoutStateOf } from '../features/stockout-state.js';
import { deleteRecomputed, deleteRetiredRows, ensureRefreshIndexes } from './refresh-indexes.js';
import {
  type ChangeMark,
  changeInside,
  changesSince,
  recordSnapshotMark,
  snapshotMark,
} from './change-log.js';

/**
 * Incremental refresh of a shift-mode snapshot from cutoff P to a later cutoff C.
 *
 * Why it is exact: in shift mode a sales cell of row t has the boundary min(C, t - g), and every
 * shift g is at least the horizon H >= 1 (the build refuses less), so for a row t <= P the
 * boundary is t - g < P under either cutoff: the cell reads the same days. Prices of such a row
 * come from weeks starting on or before t <= P, inside both price boundaries; calendar values do
 * not depend on the cutoff; group values aggregate under the same boundary; the stock-out mask
 * hides a day only from boundaries on or after the day its run became detectable, from data up
 * to that boundary. So when the definition is the same and the data inside P's boundaries is
 * unchanged (P's data fingerprint recomputed on today's tables), every training row t <= P of
 * the new snapshot equals P's row, and only rows t > P are computed: the days P+1 .. C that
 * became training rows and the new prediction rows C+1 .. C+H, less the previous prediction
 * rows that `keptPredictions` shows unchanged. Training rows before the new first training day
 * are dropped. The tests compare the result with a full rebuild cell for cell.
 *
 * The previous snapshot's table is advanced in place (one transaction: delete, insert, move the
 * catalogue row to C), because copying the unchanged rows would cost as much as the full build's
 * write-back. The refreshed table is therefore not stored in (series_id, day) order: its readers
 * order what they read (export falls back to a sorted read).
 */
export interface RefreshPlan {
  readonly version: 1;
  readonly set: string;
  readonly cutoff: string;
  readonly previousCutoff: string;
  readonly previousSnapshotId: number;
  readonly previousTable: string;
  /** The new snapshot's first training day. */
  readonly trainFrom: string;
  readonly dataFingerprint: string;
  readonly fingerprintParts: BuildPlan['fingerprintParts'];
  /** The change log before the run's fingerprint: no change may come after it before the finish. */
  readonly changeMark: ChangeMark;
  readonly priceBoundary: string;
  /**
   * The stock-out mask: `tail` resumes the rule from the previous snapshot's states and reads
   * only the newest days; `whole` reads every series' whole history (no states kept yet);
   * null: the set has no mask. Both keep states for the next refresh.
   */
  readonly stockout?: 'tail' | 'whole' | null;
  /**
   * The previous snapshot's prediction rows C+1 .. P+H are kept where they cannot have changed,
   * and only the days after them are computed; null (or absent, in an older plan): all of them
   * are computed again. See `keptPredictions`.
   */
  readonly keep?: KeptPredictions | null;
  /** A build plan over the anchor days P+1 .. C+H only; its staging table receives the new rows. */
  readonly build: BuildPlan;
}

/**
 * Why the previous prediction rows C+1 .. P+H can be kept. A prediction row t has the boundary
 * t - g <= P under both cutoffs (g >= H and t <= P + H), so its sales, group, encoding and
 * stock-out cells read the same unchanged days, and its calendar cells do not depend on the
 * cutoff (days_ahead exists only in origin mode). Only its price cells can see the cutoff: the
 * price boundary moves from pbP to pbC. A day t whose retail week starts within the boundary
 * uses that week's row, whose statistics read rows up to it only; a week starting past the
 * boundary uses the item's last row within it. So the rows stay the same unless a kept day's
 * week starts in (pbP, pbC] (then none is kept: `keptPredictions` returns null), or a kept day
 * uses the last row and the item has a price row in (pbP, pbC] (that series is computed whole,
 * as is a series first sold after P, which the previous snapshot does not hold). A set that
 * allows leaks may read past boundaries: nothing is kept.
 */
export interface KeptPredictions {
  /** The previous snapshot's price boundary pbP. */
  readonly previousPriceBoundary: string;
  /** Some kept day's week starts past pbC: an item with a price row in (pbP, pbC] is computed whole. */
  readonly usesLastPrice: boolean;
}

export function keptPredictions(
  set: ResolvedFeatureSet,
  P: number,
  C: number,
  pbP: number,
  pbC: number,
  prices: boolean,
): KeptPredictions | null {
  const H = set.shape.horizon;
  if (set.unsafe || C >= P + H) return null;
  let usesLastPrice = false;
  if (prices) {
    for (let t = C + 1; t <= P + H; t++) {
      const ws = weekStartOf(t, set.weekStart);
      if (ws > pbP && ws <= pbC) return null;
      if (ws > pbC) usesLastPrice = true;
    }
  }
  return { previousPriceBoundary: formatDay(pbP), usesLastPrice };
}

/** Why a set is rebuilt in full instead (for the run's record). */
export interface NoRefresh {
  readonly reason: string;
}

interface PrevRow {
  snapshot_id: number;
  cutoff: string;
  definition_hash: string;
  data_fingerprint: string;
  table_name: string;
  train_from: string;
  exists: boolean;
}

/**
 * Plans a refresh of `set` to `cutoff` from its newest earlier snapshot, or says why it cannot:
 * another definition, origin mode, too many days apart, older data changed. `inputs` are the
 * run's definition hash and data fingerprint for the new cutoff.
 */
/** What a refresh starts from, once `checkRefresh` found one possible (no tables made yet). */
export interface RefreshBasis {
  readonly setName: string;
  readonly cutoff: string;
  readonly previousCutoff: string;
  readonly previousSnapshotId: number;
  readonly previousTable: string;
  readonly trainFrom: string;
  readonly dataFingerprint: string;
  readonly fingerprintParts: BuildPlan['fingerprintParts'];
  readonly changeMark: ChangeMark;
}

export async function checkRefresh(
  db: Db,
  config: Config,
  setName: string,
  cutoff: string,
  inputs: {
    definitionHash: string;
    dataFingerprint: string;
    /** The parts of `dataFingerprint` (computed once by the run's planning). */
    fingerprintParts: BuildPlan['fingerprintParts'];
    /** Where the change log stood before that fingerprint. */
    changeMark: ChangeMark;
  },
): Promise<RefreshBasis | NoRefresh> {
  const set = resolveFeatureSet(config, setName);
  const def = set.definition;
  if (def.mode !== 'shift') return { reason: 'origin mode is always built in full' };
  if (set.definitionHash !== inputs.definitionHash)
    return { reason: 'the definition changed during the run' };
  const C = parseDay(cutoff)!;
  const prev = (
    await db.query<PrevRow>(
      `SELECT snapshot_id, cutoff, definition_hash, data_fingerprint, table_name, train_from,
         to_regclass(quote_ident(table_name)) IS NOT NULL AS exists
       FROM snapshots WHERE set_name = $1 AND cutoff < $2 ORDER BY cutoff DESC LIMIT 1`,
      [setName, cutoff],
    )
  ).rows[0];
  if (!prev) return { reason: 'no earlier snapshot of the set' };
  const P = parseDay(prev.cutoff)!;
  if (prev.definition_hash !== set.definitionHash)
    return { reason: `the snapshot of ${prev.cutoff} has another definition` };
  if (!prev.exists) return { reason: `the table of the snapshot of ${prev.cutoff} is missing` };
  const H = def.horizon;
  if (C - P > H)
    return { reason: `${C - P} days since the snapshot of ${prev.cutoff}, more than the horizon (${H})` };
  const from =
    def.training.from !== undefined ? parseDay(def.training.from)! : C - (def.training.days ?? 730) + 1;
  if (from < parseDay(prev.train_from)!)
    return { reason: 'the training span starts earlier than the previous one' };
  if (from > P) return { reason: 'no training row of the previous snapshot is kept' };
  // Has anything the previous snapshot read changed since? The change log answers when the
  // snapshot has a mark (built by the runner): corrections, late rows, hierarchy or calendar
  // edits and writes outside the loader are all logged. Without a mark, its own fingerprint is
  // recomputed on today's tables (a full scan).
  const changed = `data inside the boundaries of the snapshot of ${prev.cutoff} changed since it was built`;
  const m = await snapshotMark(db, Number(prev.snapshot_id));
  if (m) {
    const since = await changesSince(db, m.mark);
    if (since === null)
      return { reason: `${changed}: the change log cannot tell (a change committed out of order)` };
    const inside = changeInside(since, m);
    if (inside !== null) return { reason: `${changed}: ${inside}` };
  } else {
    const prevWindow = buildWindow(set, P, P);
    const again = await dataFingerprint((fn) => db.session(fn), P, prevWindow.priceBoundary);
    if (again.fingerprint !== prev.data_fingerprint) return { reason: changed };
  }

  return {
    setName,
    cutoff,
    previousCutoff: prev.cutoff,
    previousSnapshotId: Number(prev.snapshot_id),
    previousTable: prev.table_name,
    trainFrom: formatDay(from),
    dataFingerprint: inputs.dataFingerprint,
    fingerprintParts: inputs.fingerprintParts,
    changeMark: inputs.changeMark,
  };
}

/** Makes the refresh's tables (new rows, staged group totals) and its plan for the workers. */
export async function createRefreshPlan(db: Db, config: Config, basis: RefreshBasis): Promise<RefreshPlan> {
  const set = resolveFeatureSet(config, basis.setName);
  const def = set.definition;
  const C = parseDay(basis.cutoff)!;
  const P = parseDay(basis.previousCutoff)!;
  const cutoff = basis.cutoff;
  const setName = basis.setName;
  const w = buildWindow(set, C, P + 1);
  const rnd = randomBytes(6).toString('hex').slice(0, 8);
  const delta = safeIdent(
    `refresh_${setName.slice(0, 36)}_${formatDay(C).replaceAll('-', '')}_${rnd}`,
    'refresh table',
  );
  const groupTable = w.chain.length ? `${delta}_g` : null;
  const stockout = keepsStockoutStates(set)
    ? (await hasStockoutStates(db, basis.previousTable, basis.previousCutoff))
      ? 'tail'
      : 'whole'
    : null;
  // With the rule's state carried over, the mask needs no more history than the features do.
  const salesFrom =
    stockout === 'tail' ? P + 1 - refreshReach(set) : stockout === 'whole' ? null : w.salesFrom;
  const partitions = (
    await db.query<{ store_id: string }>('SELECT DISTINCT store_id FROM series ORDER BY store_id')
  ).rows.map((r) => r.store_id);
  const events = (
    await db.query<{ day: string; name: string; kind: string }>('SELECT day, name, kind FROM events')
  ).rows;
  const mark = (
    await db.query<{ n: number; last: number }>(
      'SELECT count(*)::int8 AS n, coalesce(max(batch_id), 0)::int8 AS last FROM load_batches',
    )
  ).rows[0]!;
  await db.exec(snapshotTableDdl(delta, set));
  if (groupTable) {
    await stageChainGroups(
      db,
      groupTable,
      w.chain,
      w.groupFrom,
      C,
      Math.min(db.parallelism, availableParallelism()),
    );
  }
  const build: BuildPlan = {
    version: 1,
    set: set.name,
    cutoff,
    from: formatDay(P + 1),
    definitionHash: set.definitionHash,
    definition: def,
    weekStartsOn: config.calendar.weekStartsOn,
    unsafe: set.unsafe,
    dataFingerprint: basis.dataFingerprint,
    fingerprintParts: basis.fingerprintParts,
    partitions,
    stagingTable: delta,
    groupTable,
    chainLevels: w.chain,
    storeLevels: w.store,
    salesFrom: salesFrom === null ? null : formatDay(salesFrom),
    groupFrom: formatDay(w.groupFrom),
    priceBoundary: formatDay(w.priceBoundary),
    anchorLo: formatDay(w.anchorLo),
    anchorHi: formatDay(w.anchorHi),
    codes: calendarCodes(events.map((e) => ({ day: parseDay(e.day)!, name: e.name, kind: e.kind }))),
    loadMark: { batches: Number(mark.n), lastBatch: Number(mark.last) },
    plannedAt: new Date().toISOString(),
    timings: {},
  };
  return {
    version: 1,
    set: set.name,
    cutoff,
    previousCutoff: basis.previousCutoff,
    previousSnapshotId: basis.previousSnapshotId,
    previousTable: basis.previousTable,
    trainFrom: basis.trainFrom,
    dataFingerprint: basis.dataFingerprint,
    fingerprintParts: basis.fingerprintParts,
    changeMark: basis.changeMark,
    priceBoundary: formatDay(w.priceBoundary),
    stockout,
    keep: keptPredictions(set, P, C, buildWindow(set, P, P).priceBoundary, w.priceBoundary, w.prices),
    build,
  };
}

export const canRefresh = (p: RefreshBasis | NoRefresh): p is RefreshBasis => 'previousTable' in p;

/**
 * Computes one partition's new rows (anchor days P+1 .. C+H) into the refresh table, replacing
 * what an earlier attempt at the same partition left there (idempotent).
 */
export async function refreshPartition(db: Db, plan: RefreshPlan, store: string): Promise<number> {
  const b = plan.build;
  const set = planFeatureSet(b);
  if (set.definitionHash !== b.definitionHash) {
    throw new LarderError(
      'PLAN_MISMATCH',
      `the feature code gives definition hash ${set.definitionHash}, the plan ${b.definitionHash}`,
    );
  }
  const table = quoteIdent(b.stagingTable);
  return db.transaction(async (tx) => {
    await tx.query('SELECT pg_advisory_xact_lock(hashtextextended($1, 0))', [
      `larder.refresh:${b.stagingTable}:${store}`,
    ]);
    if (
      !(await tx.query<{ ok: boolean }>('SELECT to_regclass($1) IS NOT NULL AS ok', [b.stagingTable]))
        .rows[0]!.ok
    ) {
      throw new LarderError('BUILD_GONE', `refresh table ${b.stagingTable} is gone`);
    }
    await tx.query(
      `DELETE FROM ${table} WHERE series_id IN (SELECT series_id FROM series WHERE store_id = $1)`,
      [store],
    );
    const pbC = parseDay(b.priceBoundary)!;
    // Sales and prices from the checks' copies when they are current (the runner's checks have
    // just brought them up to date).
    const data = await readPartition(tx, b, set, store, {
      firstDays: (st, cutoff) => readStoreFirstDays(tx, st, cutoff),
      storeSales: (st, series, base, cutoff) => readStoreSales(tx, st, series, base, cutoff),
      storePrices: async (st, departmentOf) =>
        (await readStorePricesFromCopy(tx, st, pbC, departmentOf)) ??
        (await readPartitionPrices(tx, st, pbC, departmentOf)),
    });
    const C = parseDay(b.cutoff)!;
    const P = parseDay(plan.previousCutoff)!;
    const keepFrom = C + 1 - refreshReach(set);
    const carried = plan.stockout === 'tail' ? await readStockoutStates(tx, plan.previousTable, store) : null;
    const states: Array<{ seriesId: number; state: StockoutState }> | null = plan.stockout ? [] : null;
    const maskOf = (x: PartitionData['series'][number]) => {
      if (!set.stockout) return null;
      if (carried) {
        let st = carried.get(x.seriesId);
        if (!st) {
          // Only a series first sold after P has no state; any other means the states are stale.
          if (x.firstDay <= P)
            throw new LarderError(
              'STATE_MISSING',
              `series ${x.seriesId} has no stock-out state at ${plan.previousCutoff}: build in full (--force)`,
            );
          st = {
            cutoff: P,
            firstSale: null,
            openStart: null,
            openKStar: Number.POSITIVE_INFINITY,
            runs: new Int32Array(0),
          };
        }
        const r = resumeStockoutMask(st, data.base, x.units, C, keepFrom, set.stockout);
        states!.push({ seriesId: x.seriesId, state: r.state });
        return r.mask;
      }
      const mask = stockoutMask(data.base, x.units, C, set.stockout);
      states?.push({
        seriesId: x.seriesId,
        state: stockoutStateOf(data.base, x.units, mask, C, keepFrom, set.stockout),
      });
      return mask;
    };
    const layout: RowLayout = {
      mode: 'shift' as const,
      cutoff: C,
      horizon: set.shape.horizon,
      from: parseDay(b.from)!,
      origins: new Int32Array(0),
    };
    // Series whose previous prediction rows are kept get only the days after them.
    const keep = plan.keep ?? null;
    const pbP = keep ? parseDay(keep.previousPriceBoundary)! : 0;
    const keptLayout: RowLayout = { ...layout, predictFrom: P + set.shape.horizon + 1 };
    const layoutOf = (x: PartitionData['series'][number]): RowLayout => {
      if (!keep || x.firstDay > P) return layout;
      if (keep.usesLastPrice) {
        const weeks = data.env.prices?.get(x.hierarchy.itemId)?.weeks;
        if (weeks && weeks.length > 0 && weeks[weeks.length - 1]! > pbP) return layout;
      }
      return keptLayout;
    };
    const F = set.columns.length;
    let rows = 0;
    async function* chunks(): AsyncGenerator<Uint8Array> {
      const w = new CopyBinaryWriter();
      for (const x of data.series) {
        const r = seriesRows(layoutOf(x), data.base, x.units);
        const mask = maskOf(x);
        const input: SeriesInput = {
          seriesId: x.seriesId,
          cutoff: C,
          base: data.base,
          units: x.units,
          maskFrom: mask?.maskFrom ?? null,
          maskEvents: mask?.events ?? null,
          rows: r,
          keys: x.keys,
          itemId: x.hierarchy.itemId,
        };
        const cols = computeSeriesFeatures(set, input, data.env);
        for (let i = 0; i < r.n; i++) {
          w.row(5 + F);
          w.int4(x.seriesId);
          w.date(r.day[i]!);
          w.null();
          const predict = r.isPredict[i] === 1;
          w.bool(predict);
          if (predict) w.null();
          else w.int4(r.label[i]!);
          for (let c = 0; c < F; c++) w.float8(cols[c]![i]!);
        }
        rows += r.n;
        yield* w.take();
      }
      yield* w.end();
    }
    const copied = await tx.copyFrom(`COPY ${table} FROM STDIN (FORMAT binary)`, chunks());
    if (states) await writeStockoutStates(tx, b.stagingTable, store, states);
    if (copied !== rows)
      throw new LarderError(
        'COPY_COUNT',
        `partition ${store}: wrote ${rows} rows, the server stored ${copied}`,
      );
    return rows;
  });
}

export interface RefreshResult {
  readonly snapshotId: number;
  readonly table: string;
  readonly rowCount: number;
  readonly computedRows: number;
  readonly droppedRows: number;
}

/** Rows of the previous snapshot a finish deleted before the partitions were done. */
interface Retired {
  readonly train: number;
  readonly predict: number;
}

/**
 * Moves the previous snapshot to the new cutoff in one transaction: drops its prediction rows
 * (those not kept) and the training rows before the new first day, adds the computed rows, and points the
 * catalogue row (under a new snapshot id) at the new cutoff and fingerprint. Readers holding
 * the catalogue row (withSnapshot) see the previous snapshot whole or the new one whole.
 */
export async function finishRefresh(
  db: Db,
  plan: RefreshPlan,
  timings: Record<string, unknown>,
): Promise<RefreshResult> {
  return db.transaction(async (tx) => {
    await openFinish(tx, plan);
    return completeFinish(tx, plan, timings, null);
  });
}

/** A refresh's finish begun while its partitions compute (`beginRefreshFinish`). */
export interface EarlyFinish {
  /** The partitions are done: completes the finish in the waiting transaction. */
  finish(timings: Record<string, unknown>): Promise<RefreshResult>;
  /** The partitions failed: rolls the deletes back. */
  abort(): Promise<void>;
}

/**
 * Begins the finish before the partitions are done: the deletes of the rows the new cutoff
 * retires (the prediction rows up to it, the oldest training day) do not depend on what the
 * partitions compute, and they touch a page per series of the snapshot, so PostgreSQL works
 * them while this process and the workers compute (1.0-1.1 s of a 1.7-2.9 s finish on the
 * 57M-row chain). They run in the finish's own transaction, which then waits uncommitted: until
 * it commits, readers see the previous snapshot whole, and partitions that fail roll them back.
 * Holds a pooled connection for the whole partition phase.
 */
export function beginRefreshFinish(db: Db, plan: RefreshPlan): EarlyFinish {
  let release!: (timings: Record<string, unknown> | null) => void;
  const gate = new Promise<Record<string, unknown> | null>((r) => {
    release = r;
  });
  const done = db.transaction(async (tx) => {
    // It waits idle for the partitions: a server-wide idle timeout must not end it meanwhile.
    await tx.exec('SET LOCAL idle_in_transaction_session_timeout = 0');
    await openFinish(tx, plan);
    const retired = await retireRows(tx, plan);
    const timings = await gate;
    if (timings === null)
      throw new LarderError('REFRESH_ABANDONED', `refresh ${plan.build.stagingTable} was not finished`);
    return completeFinish(tx, plan, timings, retired);
  });
  done.catch(() => {}); // awaited by finish or abort
  return {
    finish(timings) {
      release(timings);
      return done;
    },
    async abort() {
      release(null);
      await done.catch(() => {});
    },
  };
}

async function openFinish(tx: DbSession, plan: RefreshPlan): Promise<void> {
  // Every statement here touches a few rows through an index. Nothing has analysed the
  // snapshot table, so the planner guesses a third to a half of it matches each delete: it
  // would compile each statement with JIT, and on a large table scan it whole (measured on the
  // 57M-row chain's 8.8 GB table: 8.7 s and 3.9 s for the two deletes, against 0.5 s each on
  // their partial indexes). The bitmap of the prediction rows' pages stays exact in 64 MB.
  await tx.exec('SET LOCAL jit = off');
  await tx.exec('SET LOCAL enable_seqscan = off');
  await tx.exec("SET LOCAL work_mem = '64MB'");
  await tx.query('SELECT pg_advisory_xact_lock(hashtext($1))', [`larder.build.${plan.set}.${plan.cutoff}`]);
  await tx.query('SELECT pg_advisory_xact_lock(hashtext($1))', [
    `larder.build.${plan.set}.${plan.previousCutoff}`,
  ]);
}

async function retireRows(tx: DbSession, plan: RefreshPlan): Promise<Retired> {
  await ensureRefreshIndexes(tx, plan.previousTable, plan.trainFrom);
  return deleteRetiredRows(tx, plan.previousTable, plan.trainFrom, plan.keep ? plan.cutoff : null);
}

async function completeFinish(
  tx: DbSession,
  plan: RefreshPlan,
  timings: Record<string, unknown>,
  retired: Retired | null,
): Promise<RefreshResult> {
  const b = plan.build;
  const prevTable = quoteIdent(plan.previousTable);
  const delta = quoteIdent(b.stagingTable);
  const prev = await tx.query<{
    snapshot_id: number;
    row_count: number;
    train_rows: number;
    predict_rows: number;
  }>(
    'SELECT snapshot_id, row_count, train_rows, predict_rows FROM snapshots WHERE set_name = $1 AND cutoff = $2 FOR UPDATE',
    [plan.set, plan.previousCutoff],
  );
  if (Number(prev.rows[0]?.snapshot_id) !== plan.previousSnapshotId) {
    throw new LarderError(
      'BUILD_GONE',
      `the snapshot of ${plan.previousCutoff} was rebuilt or removed during the refresh`,
    );
  }
  await checkLoadMark(tx, b);
  const since = await changesSince(tx, plan.changeMark);
  if (since === null || since.length > 0)
    throw new LarderError('DATA_CHANGED', 'raw data changed while the refresh ran: run again');
  const expected = b.partitions.length;
  const parts = (
    await tx.query<{ n: number }>(
      `SELECT count(DISTINCT s.store_id)::int AS n FROM ${delta} d JOIN series s USING (series_id)`,
    )
  ).rows[0]!.n;
  if (parts !== expected) {
    throw new LarderError(
      'PARTITIONS_MISSING',
      `refresh ${b.stagingTable}: ${parts} of ${expected} partitions computed`,
    );
  }
  // A snapshot already at the new cutoff (built earlier) is replaced by the refreshed one.
  const old = await tx.query<{ table_name: string }>(
    'DELETE FROM snapshots WHERE set_name = $1 AND cutoff = $2 RETURNING table_name',
    [plan.set, plan.cutoff],
  );
  for (const r of old.rows)
    if (r.table_name !== plan.previousTable)
      await tx.exec(`DROP TABLE IF EXISTS ${quoteIdent(r.table_name)}`);
  const gone = retired ?? (await retireRows(tx, plan));
  const whole = plan.keep
    ? await deleteRecomputed(tx, plan.previousTable, {
        cutoff: plan.cutoff,
        keptUntil: formatDay(parseDay(plan.previousCutoff)! + b.definition.horizon),
        delta: b.stagingTable,
      })
    : { predict: 0, recomputed: [] };
  const dropped = { train: gone.train, predict: gone.predict + whole.predict, recomputed: whole.recomputed };
  const added = (
    await tx.query<{ train: number; predict: number }>(
      // In the delta's own order (each partition's rows in series order): sorting them first
      // cost a third of the insert and spilled to disk, and readers order what they read anyway.
      `WITH i AS (INSERT INTO ${prevTable} SELECT * FROM ${delta} RETURNING is_predict)
       SELECT count(*) FILTER (WHERE NOT is_predict)::int8 AS train, count(*) FILTER (WHERE is_predict)::int8 AS predict FROM i`,
    )
  ).rows[0]!;
  const p = prev.rows[0]!;
  const train = Number(p.train_rows) - Number(dropped.train) + Number(added.train);
  const predict = Number(p.predict_rows) - Number(dropped.predict) + Number(added.predict);
  const moved = await tx.query<{ id: number }>(
    `UPDATE snapshots SET snapshot_id = nextval(pg_get_serial_sequence('snapshots', 'snapshot_id')), cutoff = $2,
       data_fingerprint = $3, fingerprint_parts = $4, row_count = $5, train_rows = $6, predict_rows = $7,
       train_from = $8, codes = $9, timings = $10, built_at = now()
     WHERE snapshot_id = $1 RETURNING snapshot_id AS id`,
    [
      plan.previousSnapshotId,
      plan.cutoff,
      plan.dataFingerprint,
      JSON.stringify(plan.fingerprintParts),
      train + predict,
      train,
      predict,
      plan.trainFrom,
      JSON.stringify(b.codes),
      JSON.stringify({ ...timings, refreshedFrom: plan.previousCutoff }),
    ],
  );
  await recordSnapshotMark(tx, Number(moved.rows[0]!.id), {
    mark: plan.changeMark,
    cutoff: parseDay(plan.cutoff)!,
    priceBoundary: parseDay(plan.priceBoundary)!,
  });
  // What was kept, for a publish that carries those days over from the previous version.
  await tx.exec('DELETE FROM snapshot_carries WHERE snapshot_id NOT IN (SELECT snapshot_id FROM snapshots)');
  if (plan.keep) {
    const P = parseDay(plan.previousCutoff)!;
    await tx.query(
      `INSERT INTO snapshot_carries (snapshot_id, from_snapshot_id, kept_from, kept_until, recomputed)
       VALUES ($1, $2, $3::date, $4::date, $5::int4[])`,
      [
        Number(moved.rows[0]!.id),
        plan.previousSnapshotId,
        formatDay(parseDay(plan.cutoff)! + 1),
        formatDay(P + b.definition.horizon),
        dropped.recomputed,
      ],
    );
  }
  if (plan.stockout) await moveStockoutStates(tx, b.stagingTable, plan.previousTable);
  await tx.exec(`DROP TABLE ${delta}`);
  if (b.groupTable) await tx.exec(`DROP TABLE IF EXISTS ${quoteIdent(b.groupTable)}`);
  return {
    snapshotId: Number(moved.rows[0]!.id),
    table: plan.previousTable,
    rowCount: train + predict,
    computedRows: Number(added.train) + Number(added.predict),
    droppedRows: Number(dropped.train) + Number(dropped.predict),
  };
}

/** Drops a refresh's own tables (a plan that will not be finished). */
export async function abortRefresh(db: Db, plan: RefreshPlan): Promise<void> {
  await db.exec(`DROP TABLE IF EXISTS ${quoteIdent(plan.build.stagingTable)}`);
  await db.query('DELETE FROM stockout_states WHERE table_name = $1', [plan.build.stagingTable]);
  if (plan.build.groupTable) await db.exec(`DROP TABLE IF EXISTS ${quoteIdent(plan.build.groupTable)}`);
}

async function checkLoadMark(tx: DbSession, b: BuildPlan): Promise<void> {
  const mark = (
    await tx.query<{ n: number; last: number }>(
      'SELECT count(*)::int8 AS n, coalesce(max(batch_id), 0)::int8 AS last FROM load_batches',
    )
  ).rows[0]!;
  if (Number(mark.n) !== b.loadMark.batches || Number(mark.last) !== b.loadMark.lastBatch) {
    throw new LarderError('DATA_CHANGED', 'data was loaded while the refresh ran: run again');
  }
}
