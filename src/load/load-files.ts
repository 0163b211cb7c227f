/**
 * The loader's entry point: each file is one load batch in one transaction; all of its valid
 * rows land, or none. Hard file errors (header, encoding, gzip) throw an InputError and store
 * nothing; a batch with more rejects than allowed is rolled back and recorded as rejected.
 */
import { stat } from 'node:fs/promises';
import type { Config } from '../config/config.js';
import { readCopyBinary } from '../db/binary-copy.js';
import type { Db, DbSession } from '../db/database.js';
import { CopyBinaryWriter } from '../db/binary-copy.js';
import { InputError, UsageError } from '../db/errors.js';
import { type BatchOutcome, type RejectRow, recordBatch, recordChange } from './batch-record.js';
import * as sql from './load-sql.js';
import { dupKeyId, inspectHeader, type ParseJob, type ParseResult, resolveFile } from './parse-file.js';
import { startParse } from './parse-runner.js';
import type { SeriesData } from './sales-encoder.js';
import { type Layout, LOAD_TARGETS, type LoadMode, type LoadTarget, TARGETS } from './targets.js';

export interface LoadRequest {
  readonly files: Partial<Record<LoadTarget, string>>;
  /** Sales layout; detected from the header when absent. */
  readonly layout?: Layout | undefined;
  readonly mode?: LoadMode | undefined;
  /** Rejects a batch may have and still load (default config.load.maxRejects). */
  readonly maxRejects?: number | undefined;
}

export interface RejectSummary {
  readonly line: number;
  readonly reason: string;
  readonly otherLine?: number;
}

export interface BatchReport {
  readonly target: LoadTarget;
  readonly file: string;
  readonly batchId: number;
  readonly status: 'loaded' | 'rejected';
  readonly rowsRead: number;
  readonly rowsStored: number;
  readonly rowsRejected: number;
  readonly seconds: number;
  /** The first 10 rejects by line. */
  readonly firstRejects: ReadonlyArray<RejectSummary>;
}

export interface LoadReport {
  /** True when every batch loaded. */
  readonly ok: boolean;
  readonly batches: ReadonlyArray<BatchReport>;
}

/** Tuning knobs (tests and benchmarks); the defaults suit the CLI. */
export interface LoadOptions {
  /** Parse in a worker thread: always, never, or (default) for embedded files of at least `workerMinBytes`. */
  readonly parseInWorker?: boolean | 'auto';
  readonly workerMinBytes?: number;
  /** Read chunk size in bytes. */
  readonly chunkSize?: number;
  /** Bytes per COPY statement (default: one COPY on a server, 32 MB embedded). */
  readonly segmentBytes?: number;
}

/** rejected_rows keeps this many rejects per batch; load_batches.rows_rejected counts all. */
export const RECORDED_REJECTS = 10_000;
const FIRST_REJECTS = 10;
const WORKER_MIN_BYTES = 8 << 20;
// PGlite buffers a whole COPY in memory; cut embedded loads into COPYs of this size.
const EMBEDDED_SEGMENT_BYTES = 32 << 20;

/** Loads the given files in dependency order (hierarchy and calendar before prices and sales). */
export async function loadFiles(
  db: Db,
  config: Config,
  req: LoadRequest,
  opts: LoadOptions = {},
): Promise<LoadReport> {
  const targets = LOAD_TARGETS.filter((t) => req.files[t] !== undefined);
  if (targets.length === 0) throw new UsageError('nothing to load: give at least one file');
  const maxRejects = req.maxRejects ?? config.load.maxRejects;
  if (!Number.isInteger(maxRejects) || maxRejects < 0)
    throw new UsageError('maxRejects must be a whole number >= 0');
  // Every header is checked before anything is stored, so a wrong column in the last file does
  // not leave the first ones loaded.
  for (const target of targets) {
    await inspectHeader({
      file: req.files[target]!,
      target,
      layout: layoutFor(target, req),
      columnMap: mapFor(config, target),
    });
  }
  const batches: BatchReport[] = [];
  for (const target of targets)
    batches.push(await loadOne(db, config, target, req.files[target]!, req, maxRejects, opts));
  return { ok: batches.every((b) => b.status === 'loaded'), batches };
}

const layoutFor = (target: LoadTarget, req: LoadRequest) => (target === 'sales' ? req.layout : undefined);
const mapFor = (config: Config, target: LoadTarget) => config.load.columns[target];

/** Thrown inside the batch transaction to roll it back; carries what to record afterwards. */
class BatchRejected extends Error {
  constructor(readonly outcome: Omit<BatchOutcome, 'status'>) {
    super('batch rejected');
  }
}

async function loadOne(
  db: Db,
  config: Config,
  target: LoadTarget,
  file: string,
  req: LoadRequest,
  maxRejects: number,
  opts: LoadOptions,
): Promise<BatchReport> {
  const spec = TARGETS[target];
  const mode = req.mode ?? 'append';
  const startedAt = new Date();
  const t0 = performance.now();
  const inWorker = await useWorker(file, db.kind, opts);
  let outcome: BatchOutcome;
  let batchId: number;
  try {
    [outcome, batchId] = await db.transaction(async (tx) => {
      await tx.exec(sql.lockSql(spec));
      // The batch logs its own exact day range (recordChange); the raw tables' statement
      // triggers stay quiet for this transaction.
      await tx.query(sql.LOADER_SESSION_SQL);
      const series = target === 'sales' ? await readSeries(tx) : undefined;
      // Fast path: into an empty sales table no stored row can conflict, so rows skip staging.
      const direct =
        target === 'sales' && !(await tx.query<{ has: boolean }>(sql.hasRowsSql(spec))).rows[0]!.has;
      if (!direct) await tx.exec(sql.createStageSql(spec));
      const job: ParseJob = {
        file,
        target,
        layout: layoutFor(target, req),
        columnMap: mapFor(config, target),
        staged: !direct,
        series,
        maxRejects,
        recordLimit: RECORDED_REJECTS,
        segmentBytes:
          opts.segmentBytes ?? (db.kind === 'embedded' ? EMBEDDED_SEGMENT_BYTES : Number.POSITIVE_INFINITY),
        chunkSize: opts.chunkSize,
      };
      const copySql = direct ? sql.copyTargetSql(spec) : sql.copyStageSql(spec);
      const run = startParse(job, inWorker);
      let copied = 0;
      try {
        for await (const segment of run.segments) copied += await tx.copyFrom(copySql, segment);
      } catch (err) {
        await run.stop();
        const parseErr = await run.result.then(
          () => null,
          (e: unknown) => e,
        );
        throw parseErr instanceof InputError ? parseErr : err;
      }
      const res = await run.result;
      if (res.newSeries.seriesIds.length > 0) await insertSeries(tx, res.newSeries);
      let rejected = res.rejectCount;
      let stored = copied;
      let conflicts: RejectRow[] = [];
      if (!direct) {
        if (mode === 'append') {
          const found = await findConflicts(tx, target);
          conflicts = found.rows;
          rejected += found.count;
        }
        if (rejected <= maxRejects) {
          if (copied > 10_000) await tx.exec(`ANALYZE ${sql.STAGE}`);
          if (mode === 'replace') await tx.exec(sql.replaceDeleteSql(spec));
          stored = (await tx.query(sql.insertFromStageSql(spec, mode))).rowCount;
        }
      }
      const rejects = await finishRejects(job, res, conflicts);
      const base = {
        target,
        file,
        mode,
        layout: target === 'sales' ? res.layout : null,
        rowsRead: res.rowsRead,
        rowsRejected: rejected,
        firstDay: res.firstDay,
        lastDay: res.lastDay,
        startedAt,
        rejects,
      };
      const capped = rejected > RECORDED_REJECTS ? `; rejected_rows keeps the first ${RECORDED_REJECTS}` : '';
      if (rejected > maxRejects) {
        throw new BatchRejected({
          ...base,
          rowsStored: 0,
          message:
            `${rejected} ${rejected === 1 ? 'row was' : 'rows were'} rejected, more than the limit of ${maxRejects} ` +
            `(max rejects); nothing from this file was stored${capped}`,
        });
      }
      const message =
        rejected > 0
          ? `${rejected} ${rejected === 1 ? 'row' : 'rows'} rejected (limit ${maxRejects})${capped}`
          : null;
      const loaded: BatchOutcome = { ...base, status: 'loaded', rowsStored: stored, message };
      const id = await recordBatch(tx, loaded);
      if (stored > 0) await recordChange(tx, spec.table, loaded, id);
      return [loaded, id] as const;
    });
  } catch (err) {
    if (!(err instanceof BatchRejected)) throw err;
    outcome = { ...err.outcome, status: 'rejected' };
    const rejectedOutcome = outcome;
    batchId = await db.transaction((tx) => recordBatch(tx, rejectedOutcome));
  }
  return {
    target,
    file,
    batchId,
    status: outcome.status,
    rowsRead: outcome.rowsRead,
    rowsStored: outcome.rowsStored,
    rowsRejected: outcome.rowsRejected,
    seconds: (performance.now() - t0) / 1000,
    firstRejects: outcome.rejects.slice(0, FIRST_REJECTS).map((r) => ({
      line: r.line,
      reason: r.reason,
      ...(r.otherLine === undefined ? {} : { otherLine: r.otherLine }),
    })),
  };
}

/**
 * On a server the database works in its own process, so parsing inline already overlaps with it:
 * a 2M-row load took the same CPU inline and in a worker, and the worker's second heap raised the
 * peak RSS from 175 to 270 MB. Embedded, PGlite runs on the main thread, so a big file is parsed
 * in a worker while PGlite ingests the previous COPY.
 */
async function useWorker(file: string, kind: Db['kind'], opts: LoadOptions): Promise<boolean> {
  const choice = opts.parseInWorker ?? 'auto';
  if (choice !== 'auto') return choice;
  if (kind === 'server') return false;
  try {
    const st = await stat(file);
    // A gzip file holds several times its size in CSV.
    const gz = /\.gz$/i.test(file) ? 4 : 1;
    return st.size * gz >= (opts.workerMinBytes ?? WORKER_MIN_BYTES);
  } catch {
    return false; // the pass reports the read error itself
  }
}

async function readSeries(tx: DbSession): Promise<SeriesData> {
  const data: SeriesData = { itemIds: [], storeIds: [], seriesIds: [], storedCount: 0, nextId: 1 };
  for await (const b of readCopyBinary(tx.copyTo(sql.SERIES_COPY_OUT), ['int4', 'text', 'text'])) {
    const ids = b.columns[0] as Int32Array;
    const items = b.columns[1] as string[];
    const stores = b.columns[2] as string[];
    for (let i = 0; i < b.length; i++) {
      data.seriesIds.push(ids[i]!);
      data.itemIds.push(items[i]!);
      data.storeIds.push(stores[i]!);
    }
  }
  data.nextId = (await tx.query<{ next: number }>(sql.SERIES_NEXT_ID)).rows[0]!.next;
  return { ...data, storedCount: data.seriesIds.length };
}

async function insertSeries(tx: DbSession, s: ParseResult['newSeries']): Promise<void> {
  const w = new CopyBinaryWriter();
  for (let i = 0; i < s.seriesIds.length; i++) {
    w.row(3);
    w.int4(s.seriesIds[i]!);
    w.text(s.itemIds[i]!);
    w.text(s.storeIds[i]!);
  }
  await tx.copyFrom(sql.SERIES_COPY_IN, [...w.take(), ...w.end()]);
  await tx.query(sql.SERIES_SYNC_SEQUENCE);
}

/** Staged rows whose key is already stored (append): the first ones with their keys, and the count. */
async function findConflicts(
  tx: DbSession,
  target: LoadTarget,
): Promise<{ rows: RejectRow[]; count: number }> {
  const res = await tx.query<Record<string, unknown> & { n: number; line: number }>(
    sql.conflictsSql(TARGETS[target]),
    [RECORDED_REJECTS],
  );
  const rows = res.rows.map((r) => {
    const { n: _n, line, ...key } = r;
    return {
      line: Number(line),
      reason: 'key already stored',
      raw: '',
      key: JSON.stringify(Object.values(key)),
    };
  });
  return { rows, count: res.rows.length > 0 ? Number(res.rows[0]!.n) : 0 };
}

/**
 * Completes the rejects: names the first line of each in-file duplicate and fetches the raw
 * lines of rows found already stored, in one second pass when either is needed.
 */
async function finishRejects(job: ParseJob, res: ParseResult, conflicts: RejectRow[]): Promise<RejectRow[]> {
  const pendingDups = res.rejects.filter((r) => r.dup !== undefined && r.otherLine === undefined);
  let raw = new Map<number, string>();
  let firstLine = new Map<string, number>();
  if (pendingDups.length > 0 || conflicts.length > 0) {
    ({ raw, firstLine } = await resolveFile(
      job,
      conflicts.map((c) => c.line),
      pendingDups.map((r) => r.dup!),
    ));
  }
  const all: RejectRow[] = res.rejects.map((r) => {
    const otherLine = r.otherLine ?? (r.dup ? firstLine.get(dupKeyId(r.dup)) : undefined);
    const reason =
      r.reason === 'duplicate key'
        ? `duplicate key ${r.key}: ${otherLine === undefined ? 'repeats an earlier line' : `also on line ${otherLine}`}`
        : r.reason;
    return { line: r.line, reason, raw: r.raw, key: r.key, otherLine };
  });
  for (const c of conflicts)
    all.push({ ...c, reason: `key already stored: ${c.key}`, raw: raw.get(c.line) ?? '' });
  all.sort((a, b) => a.line - b.line);
  return all.slice(0, RECORDED_REJECTS);
}
