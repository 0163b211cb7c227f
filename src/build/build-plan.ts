import { randomBytes } from 'node:crypto';
import { availableParallelism } from 'node:os';
import type { Config } from '../config/config.js';
import { formatDay, parseDay } from '../core/days.js';
import { type Db, quoteIdent, safeIdent } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import { type CalendarCodes, calendarCodes } from '../features/calendar.js';
import {
  compileFeatureSet,
  type FeatureSetDefinition,
  type ResolvedFeatureSet,
  resolveFeatureSet,
} from '../features/feature-set.js';
import { type GroupLevel, LEVELS } from '../features/group-levels.js';
import { type DataFingerprint, dataFingerprint, type FingerprintPart, SalesChecksum } from './fingerprint.js';
import { stageChainGroups } from './chain-groups.js';
import { chainLevels } from './group-stage.js';
import { trainingOrigins } from './series-rows.js';

/** What to build: a set of the config, a cutoff, optionally the first training day. */
export interface BuildRequest {
  readonly set: string;
  readonly cutoff: string;
  readonly from?: string | undefined;
}

/** Internal options (tests, the audit): build a compiled set instead of the config's. */
export interface BuildOptions {
  readonly featureSet?: ResolvedFeatureSet;
  /**
   * In-process builds (`buildSnapshot`): reads the partitions while the plan fingerprints the
   * data, and sums the chain-wide group totals from those reads instead of staging them in a
   * pass of their own. Called with the plan as it will be, less its data fingerprint, and
   * only when every partition's reads cover the group days and fit `IN_PROCESS_CELLS`; the
   * plan then has no group table, and only this process can build its partitions. When the
   * reads cover every sales day (`salesFrom` null), each row read goes into `sales`, which
   * then stands for the fingerprint's own scan of the sales.
   */
  readonly alongside?: (draft: BuildPlan, sales: SalesChecksum | null) => Promise<void>;
}

/**
 * Most dense daily units (8 bytes each) an in-process build holds at once: every partition is
 * read before any computes, so the chain's history sits in memory (57M sales rows: 456 MB).
 */
export const IN_PROCESS_CELLS = 2 ** 27;

/**
 * A planned build, serialisable as JSON so partitions can run in other processes: they build
 * exactly this definition over exactly these partitions into the staging table.
 */
export interface BuildPlan {
  readonly version: 1;
  readonly set: string;
  readonly cutoff: string;
  /** First training day (shift mode) or first training origin (origin mode). */
  readonly from: string;
  readonly definitionHash: string;
  readonly definition: FeatureSetDefinition;
  readonly weekStartsOn: string;
  readonly unsafe: boolean;
  readonly dataFingerprint: string;
  readonly fingerprintParts: Readonly<Record<string, FingerprintPart>>;
  /** Store ids, one partition each. */
  readonly partitions: readonly string[];
  /** Becomes the snapshot table when the build finishes. */
  readonly stagingTable: string;
  /** Chain-wide group totals staged for the partitions, or null when the set has none. */
  readonly groupTable: string | null;
  readonly chainLevels: readonly GroupLevel[];
  readonly storeLevels: readonly GroupLevel[];
  /** First sales day read; null = the whole history (the stock-out mask needs it). */
  readonly salesFrom: string | null;
  readonly groupFrom: string;
  readonly priceBoundary: string;
  readonly anchorLo: string;
  readonly anchorHi: string;
  readonly codes: CalendarCodes;
  /** Load batches seen when planning; a load before the finish makes the build fail. */
  readonly loadMark: { readonly batches: number; readonly lastBatch: number };
  readonly plannedAt: string;
  /** Milliseconds of the plan's scans (fingerprint, group totals). */
  readonly timings: Readonly<Record<string, number>>;
}

/** The compiled set of a plan (partitions and finish run from the plan, not from the config). */
export function planFeatureSet(plan: BuildPlan): ResolvedFeatureSet {
  return compileFeatureSet(plan.definition, plan.weekStartsOn, plan.unsafe);
}

function dayArg(text: string, what: string): number {
  const d = parseDay(text);
  if (d === null) throw new UsageError(`${what}: '${text}' is not an ISO 8601 day (YYYY-MM-DD)`);
  return d;
}

/** Days and reaches a build needs, from its set and cutoff. */
export function buildWindow(set: ResolvedFeatureSet, cutoff: number, from: number) {
  const def = set.definition;
  const origins = def.mode === 'origin' ? trainingOrigins(cutoff, from, def.originEvery) : new Int32Array(0);
  const anchorLo = def.mode === 'shift' ? from : (origins.length ? origins[0]! : cutoff) + 1;
  const anchorHi = def.mode === 'shift' ? cutoff + def.horizon : cutoff + 1;
  let salesReach = 0;
  let groupReach = 0;
  const levels = new Set<GroupLevel>();
  let prices = false;
  let calendar = false;
  for (const f of set.families) {
    const n = f.family.needs(f.params, set.shape);
    if (n.sales) salesReach = Math.max(salesReach, n.salesReach);
    groupReach = Math.max(groupReach, n.groupReach);
    for (const l of n.levels) levels.add(l);
    prices ||= n.prices;
    calendar ||= n.calendar;
  }
  const chain = chainLevels(levels);
  const store = [...levels].filter((l) => LEVELS[l].scope === 'store');
  const groupFrom = anchorLo - groupReach;
  // Labels need the training days themselves; store levels are summed from the partition's rows.
  let salesFrom = Math.min(anchorLo - salesReach, def.mode === 'shift' ? from : anchorLo);
  if (store.length) salesFrom = Math.min(salesFrom, groupFrom);
  const priceBoundary = cutoff + (def.pricesKnownAhead ? def.horizon : 0);
  return {
    origins,
    anchorLo,
    anchorHi,
    salesFrom: set.stockout ? null : salesFrom,
    groupFrom,
    chain,
    store,
    prices,
    calendar,
    priceBoundary,
  };
}

/** A staging table name: feat_<set>_<yyyymmdd>_<random>, at most 59 characters (suffixes fit in 63). */
function stagingName(set: string, cutoff: number): string {
  const ymd = formatDay(cutoff).replaceAll('-', '');
  const rnd = randomBytes(6)
    .toString('base64url')
    .toLowerCase()
    .replace(/[^a-z0-9]/g, '0')
    .slice(0, 6);
  return safeIdent(`feat_${set.slice(0, 38)}_${ymd}_${rnd}`, 'snapshot table');
}

/** DDL of a snapshot table for a set's columns (DESIGN.md / docs/contracts.md layout). */
export function snapshotTableDdl(table: string, set: ResolvedFeatureSet): string {
  const features = set.columns.map((c) => `${quoteIdent(safeIdent(c.name, 'feature name'))} float8`);
  return `CREATE TABLE ${quoteIdent(table)} (series_id int4 NOT NULL, day date NOT NULL, origin date, is_predict bool NOT NULL, label int4${features.length ? `, ${features.join(', ')}` : ''})`;
}

/**
 * Plans a build: validates the request, fingerprints the data, stages chain-wide group totals,
 * creates the staging table and records the plan. Cheap next to the partitions, which do the
 * work; the plan is what the job runner hands to its workers.
 */
export async function planBuild(
  db: Db,
  config: Config,
  req: BuildRequest,
  opts: BuildOptions = {},
): Promise<BuildPlan> {
  const set = opts.featureSet ?? resolveFeatureSet(config, req.set);
  const def = set.definition;
  const cutoff = dayArg(req.cutoff, 'cutoff');
  const from =
    req.from !== undefined
      ? dayArg(req.from, 'from')
      : def.training.from !== undefined
        ? parseDay(def.training.from)!
        : cutoff - (def.training.days ?? 730) + 1;
  if (from > cutoff) throw new UsageError(`from ${formatDay(from)} is after the cutoff ${formatDay(cutoff)}`);
  const w = buildWindow(set, cutoff, from);
  const table = stagingName(set.name, cutoff);
  // Partitions read sales from salesFrom (null: every day); the chain totals need groupFrom on.
  const covers = w.chain.length === 0 || w.salesFrom === null || w.salesFrom <= w.groupFrom;
  let inProcess = false;
  if (opts.alongside && covers) {
    const est = (
      await db.query<{ series: number; sales: number }>(
        `SELECT (SELECT count(*) FROM series)::int8 AS series,
           (SELECT greatest(reltuples, 0) FROM pg_class WHERE oid = 'sales'::regclass)::int8 AS sales`,
      )
    ).rows[0]!;
    const cells = w.salesFrom === null ? Number(est.sales) : Number(est.series) * (cutoff - w.salesFrom + 1);
    inProcess = cells <= IN_PROCESS_CELLS;
  }
  const groupTable = w.chain.length && !inProcess ? `${table}_g` : null;

  const partitions = (
    await db.query<{ store_id: string }>('SELECT DISTINCT store_id FROM series ORDER BY store_id')
  ).rows.map((r) => r.store_id);
  const events = (
    await db.query<{ day: string; name: string; kind: string }>('SELECT day, name, kind FROM events')
  ).rows;
  const codes = calendarCodes(events.map((e) => ({ day: parseDay(e.day)!, name: e.name, kind: e.kind })));
  const mark = (
    await db.query<{ n: number; last: number }>(
      'SELECT count(*)::int8 AS n, coalesce(max(batch_id), 0)::int8 AS last FROM load_batches',
    )
  ).rows[0]!;

  try {
    // The fingerprint and the group totals are independent scans: run them side by side.
    const concurrency = Math.min(db.parallelism, availableParallelism());
    const tp = performance.now();
    const timed = async <T>(name: string, p: Promise<T>) => {
      const v = await p;
      planTimings[name] = Math.round(performance.now() - tp);
      return v;
    };
    const planTimings: Record<string, number> = {};
    const draft = (fp: DataFingerprint): BuildPlan => ({
      version: 1,
      set: set.name,
      cutoff: formatDay(cutoff),
      from: formatDay(def.mode === 'origin' && w.origins.length ? w.origins[0]! : from),
      definitionHash: set.definitionHash,
      definition: def,
      weekStartsOn: config.calendar.weekStartsOn,
      unsafe: set.unsafe,
      dataFingerprint: fp.fingerprint,
      fingerprintParts: fp.parts,
      partitions,
      stagingTable: table,
      groupTable,
      chainLevels: w.chain,
      storeLevels: w.store,
      salesFrom: w.salesFrom === null ? null : formatDay(w.salesFrom),
      groupFrom: formatDay(w.groupFrom),
      priceBoundary: formatDay(w.priceBoundary),
      anchorLo: formatDay(w.anchorLo),
      anchorHi: formatDay(w.anchorHi),
      codes,
      loadMark: { batches: Number(mark.n), lastBatch: Number(mark.last) },
      plannedAt: new Date().toISOString(),
      timings: planTimings,
    });
    // Every series belongs to a store, so the partitions' reads from the first day are every
    // sales row up to C a build can see (the scan also counts rows of no series: none the
    // loader writes).
    const checksum = inProcess && w.salesFrom === null ? new SalesChecksum() : null;
    const reads =
      inProcess && opts.alongside
        ? timed('readsMs', opts.alongside(draft({ fingerprint: '', parts: {} }), checksum))
        : Promise.resolve();
    const [fp] = await Promise.all([
      timed(
        'fingerprintMs',
        dataFingerprint(
          (fn) => db.session(fn),
          cutoff,
          w.priceBoundary,
          checksum ? reads.then(() => checksum.part()) : undefined,
        ),
      ),
      groupTable
        ? timed('groupsMs', stageChainGroups(db, groupTable, w.chain, w.groupFrom, cutoff, concurrency))
        : Promise.resolve(),
      reads,
    ]);
    const plan = draft(fp);
    await db.transaction(async (tx) => {
      await tx.exec(snapshotTableDdl(table, set));
      await tx.query(
        'INSERT INTO snapshot_builds (table_name, set_name, cutoff, plan) VALUES ($1, $2, $3, $4)',
        [table, set.name, plan.cutoff, JSON.stringify(plan)],
      );
    });
    return plan;
  } catch (err) {
    if (groupTable) {
      await db
        .exec(`DROP TABLE IF EXISTS ${quoteIdent(groupTable)}, ${quoteIdent(`${groupTable}_r`)}`)
        .catch(() => {});
    }
    throw err;
  }
}
