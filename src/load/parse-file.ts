/**
 * One pass over one input file: records -> validated rows -> binary COPY chunks, with rejects
 * (line, reason, raw line) on the side. It has no database access, so it runs in a worker thread
 * as well as inline, and a second "resolve" pass reuses it to find what the first pass could not
 * know in the stream (the first line of a duplicate key; raw lines of rows the database refused).
 */
import { CopyBinaryWriter } from '../db/binary-copy.js';
import { CsvRecords, READ_CHUNK } from './csv-records.js';
import type { DupKey, EncodeContext, RejectDetail, RowEncoder } from './encode-context.js';
import { type HeaderPlan, resolveHeader } from './header.js';
import { type SeriesData, SalesEncoder, SeriesLookup } from './sales-encoder.js';
import { TableEncoder } from './table-encoder.js';
import { type Layout, type LoadTarget, TARGETS } from './targets.js';

/** COPY chunks of the read chunks' size (see READ_CHUNK: smaller chunks kept the peak RSS low). */
const COPY_CHUNK = READ_CHUNK;

export interface ParseJob {
  readonly file: string;
  readonly target: LoadTarget;
  readonly layout?: Layout | undefined;
  readonly columnMap?: Readonly<Record<string, string | null>> | undefined;
  /** Rows carry their line number (for a staging table). */
  readonly staged: boolean;
  /** Sales only: the stored series. */
  readonly series?: SeriesData | undefined;
  /** Beyond this many rejects the batch is lost: direct rows stop, rejects are still counted. */
  readonly maxRejects: number;
  /** Rejects kept with their detail (rejected_rows); later ones are only counted. */
  readonly recordLimit: number;
  /** Bytes per COPY statement (embedded mode buffers each one); Infinity for one COPY. */
  readonly segmentBytes: number;
  readonly chunkSize?: number | undefined;
}

export interface RejectEntry {
  readonly line: number;
  readonly reason: string;
  readonly raw: string;
  readonly key?: string;
  readonly otherLine?: number;
  readonly dup?: DupKey;
}

export interface ParseResult {
  readonly layout: Layout;
  readonly delimiter: string;
  /** Data records read (the header not counted). */
  readonly rowsRead: number;
  readonly rowsWritten: number;
  readonly rejectCount: number;
  /** The first `recordLimit` rejects, in line order. */
  readonly rejects: RejectEntry[];
  readonly firstDay: number | null;
  readonly lastDay: number | null;
  /** Sales: series created by this file (ids assigned from the stored maximum). */
  readonly newSeries: {
    readonly itemIds: string[];
    readonly storeIds: string[];
    readonly seriesIds: number[];
  };
}

/** Where a pass's COPY chunks go; a promise from `chunk` is backpressure. */
export interface ParseSink {
  chunk(bytes: Uint8Array): Promise<void> | void;
  /** The current COPY stream is complete (a new one follows unless the pass has ended). */
  segmentEnd(): Promise<void> | void;
}

function encoderFor(
  target: LoadTarget,
  ctx: EncodeContext,
  plan: HeaderPlan,
  series?: SeriesLookup,
): RowEncoder {
  if (target === 'sales') return new SalesEncoder(ctx, plan, series!);
  return new TableEncoder(ctx, plan, TARGETS[target]);
}

interface PassHooks {
  readonly accepted?: ((prefix: string, day: number, line: number) => void) | undefined;
  readonly record?: (line: number, start: number, end: number) => void;
}

async function pass(
  job: ParseJob,
  sink: ParseSink | null,
  hooks: PassHooks,
  reader: CsvRecords,
): Promise<ParseResult> {
  const series = job.series
    ? new SeriesLookup({
        itemIds: [...job.series.itemIds],
        storeIds: [...job.series.storeIds],
        seriesIds: [...job.series.seriesIds],
        storedCount: job.series.itemIds.length,
        nextId: job.series.nextId,
      })
    : undefined;
  let writer: CopyBinaryWriter | null = sink ? new CopyBinaryWriter(COPY_CHUNK) : null;
  let segmentBytes = 0;
  let rejectCount = 0;
  let rowsRead = 0;
  let firstDay = Number.POSITIVE_INFINITY;
  let lastDay = Number.NEGATIVE_INFINITY;
  const rejects: RejectEntry[] = [];
  const ctx: EncodeContext = {
    // A batch over its limit is lost; direct rows stop there, staged rows still go on so the
    // database can name the stored keys the file repeats (all of a file's problems in one run).
    get writer() {
      return !job.staged && rejectCount > job.maxRejects ? null : writer;
    },
    staged: job.staged,
    accepted: hooks.accepted ?? null,
    rowsWritten: 0,
    reject(line: number, reason: string, start: number, end: number, detail?: RejectDetail): undefined {
      rejectCount++;
      if (rejects.length < job.recordLimit)
        rejects.push({ line, reason, raw: reader.raw(start, end), ...detail });
    },
    noteDay(day: number) {
      if (day < firstDay) firstDay = day;
      if (day > lastDay) lastDay = day;
    },
  };
  let encoder: RowEncoder | null = null;
  let layout: Layout = 'long';
  const flush = async (final: boolean) => {
    if (!sink || !writer) return;
    const chunks = final ? writer.end() : writer.take();
    for (const c of chunks) {
      segmentBytes += c.byteLength;
      await sink.chunk(c);
    }
    if (final) {
      await sink.segmentEnd();
      writer = null;
    } else if (segmentBytes >= job.segmentBytes) {
      for (const c of writer.end()) await sink.chunk(c);
      await sink.segmentEnd();
      writer = new CopyBinaryWriter(COPY_CHUNK);
      segmentBytes = 0;
    }
  };
  const { delimiter } = await reader.read(
    (fields, line, start, end) => {
      if (encoder === null) {
        const plan = resolveHeader(job.target, fields, {
          file: job.file,
          layout: job.layout,
          columnMap: job.columnMap,
        });
        layout = plan.layout;
        encoder = encoderFor(job.target, ctx, plan, series);
        return;
      }
      rowsRead++;
      hooks.record?.(line, start, end);
      encoder.record(fields, line, start, end);
    },
    { afterChunk: () => flush(false), ...(job.chunkSize ? { chunkSize: job.chunkSize } : {}) },
  );
  await flush(true);
  const d = series?.data;
  const from = d?.storedCount ?? 0;
  return {
    layout,
    delimiter,
    rowsRead,
    rowsWritten: ctx.rowsWritten,
    rejectCount,
    rejects,
    firstDay: Number.isFinite(firstDay) ? firstDay : null,
    lastDay: Number.isFinite(lastDay) ? lastDay : null,
    newSeries: {
      itemIds: d ? d.itemIds.slice(from) : [],
      storeIds: d ? d.storeIds.slice(from) : [],
      seriesIds: d ? d.seriesIds.slice(from) : [],
    },
  };
}

/** The first pass: every row of the file to `sink`, rejects kept with their raw lines. */
export function parseFile(job: ParseJob, sink: ParseSink): Promise<ParseResult> {
  return pass(job, sink, {}, new CsvRecords(job.file));
}

/** Reads only the header and checks it against the contract (throws an InputError if wrong). */
export async function inspectHeader(
  job: Pick<ParseJob, 'file' | 'target' | 'layout' | 'columnMap'>,
): Promise<Layout> {
  let layout: Layout = 'long';
  await new CsvRecords(job.file).read(
    (fields) => {
      layout = resolveHeader(job.target, fields, job).layout;
    },
    { headerOnly: true },
  );
  return layout;
}

export interface ResolveResult {
  /** Raw text of each wanted line. */
  readonly raw: Map<number, string>;
  /** First accepted line of each wanted duplicate key (`prefix U+0001 day`). */
  readonly firstLine: Map<string, number>;
}

export const dupKeyId = (k: DupKey) => `${k.prefix}\u0001${k.day}`;

/**
 * The second pass, run only when needed: replays the first pass's decisions (same records, same
 * order, same rules) without writing, to name the first line of each duplicate key and to fetch
 * the raw lines of rows the database found already stored.
 */
export async function resolveFile(
  job: ParseJob,
  wantedLines: readonly number[],
  wantedKeys: readonly DupKey[],
): Promise<ResolveResult> {
  const lines = [...new Set(wantedLines)].sort((a, b) => a - b);
  const keys = new Set(wantedKeys.map(dupKeyId));
  const prefixes = new Set(wantedKeys.map((k) => k.prefix));
  const raw = new Map<number, string>();
  const firstLine = new Map<string, number>();
  const reader = new CsvRecords(job.file);
  let next = 0;
  let lastPrefix: string | null = null;
  let lastWanted = false;
  await pass(
    { ...job, maxRejects: Number.POSITIVE_INFINITY, recordLimit: 0 },
    null,
    {
      record(line, start, end) {
        while (next < lines.length && lines[next]! < line) next++;
        if (lines[next] === line) raw.set(line, reader.raw(start, end));
      },
      accepted:
        keys.size === 0
          ? undefined
          : (prefix, day, line) => {
              if (prefix !== lastPrefix) {
                lastPrefix = prefix;
                lastWanted = prefixes.has(prefix);
              }
              if (!lastWanted) return;
              const id = `${prefix}\u0001${day}`;
              if (keys.has(id) && !firstLine.has(id)) firstLine.set(id, line);
            },
    },
    reader,
  );
  return { raw, firstLine };
}
