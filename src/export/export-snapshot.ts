import { basename, resolve } from 'node:path';
import type { Config } from '../config/config.js';
import type { Db, DbSession } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import { arrowSchema, type SeriesIds, seriesIds } from './arrow-batch.js';
import { ArrowSink } from './arrow-sink.js';
import { CsvSink } from './csv-sink.js';
import {
  type ExportColumn,
  type ExportLayout,
  exportLayout,
  type RowSelection,
  type Selection,
} from './export-layout.js';
import { HashingFile } from './hashing-file.js';
import { ParquetSink } from './parquet-sink.js';
import { pinSnapshot, type SnapshotInfo } from './snapshot-entry.js';
import { type ExportBatch, OutOfOrderError, readSnapshot } from './snapshot-reader.js';

export type ExportFormat = 'parquet' | 'csv' | 'arrow';
export const EXPORT_FORMATS: readonly ExportFormat[] = ['parquet', 'csv', 'arrow'];

export interface ExportOptions extends Selection {
  readonly set: string;
  readonly cutoff: string;
  /** Destination file; the manifest is written beside it as `<out>.manifest.json`. */
  readonly out: string;
  readonly format?: ExportFormat;
}

export interface ExportResult {
  readonly path: string;
  readonly manifestPath: string;
  readonly rowCount: number;
  readonly sha256: string;
}

/** What an export (or an open snapshot) contains, independent of where it was written. */
export interface SnapshotManifest {
  readonly set: string;
  readonly cutoff: string;
  readonly mode: 'shift' | 'origin';
  readonly horizon: number;
  readonly definitionHash: string;
  readonly dataFingerprint: string;
  readonly snapshotId: number;
  readonly builtAt: string;
  readonly rows: RowSelection;
  readonly from: string | null;
  readonly to: string | null;
  readonly order: readonly string[];
  readonly columns: readonly ExportColumn[];
}

/** The manifest written beside an export file. */
export interface ExportManifest extends SnapshotManifest {
  readonly file: string;
  readonly format: ExportFormat;
  readonly rowCount: number;
  readonly bytes: number;
  readonly sha256: string;
}

export function snapshotManifest(info: SnapshotInfo, layout: ExportLayout): SnapshotManifest {
  return {
    set: info.set,
    cutoff: info.cutoff,
    mode: info.mode,
    horizon: info.horizon,
    definitionHash: info.definitionHash,
    dataFingerprint: info.dataFingerprint,
    snapshotId: info.snapshotId,
    builtAt: info.builtAt,
    rows: layout.rows,
    from: layout.from,
    to: layout.to,
    order: layout.hasOrigin
      ? ['item_id/store_id (series)', 'origin', 'day']
      : ['item_id/store_id (series)', 'day'],
    columns: layout.columns,
  };
}

/** Item and store ids of every series (tens of thousands of rows: held in memory). */
export async function loadSeriesIds(s: DbSession): Promise<SeriesIds> {
  return seriesIds(
    (
      await s.query<{ series_id: number; item_id: string; store_id: string }>(
        'SELECT series_id, item_id, store_id FROM series',
      )
    ).rows,
  );
}

/** Snapshot tables (schema.table) found not stored in row order; snapshot tables never change. */
const UNORDERED = new Set<string>();

interface Sink {
  write(b: ExportBatch): void | Promise<void>;
  finish(): Promise<void>;
  /** Releases what the sink holds (a worker) after a failure. */
  abort?(): Promise<void>;
}

function openSink(
  format: ExportFormat,
  file: HashingFile,
  layout: ExportLayout,
  ids: SeriesIds,
  info: SnapshotInfo,
): Sink {
  const schema = arrowSchema(layout.columns);
  if (format === 'csv') return new CsvSink(file, layout, ids);
  if (format === 'arrow') return new ArrowSink(file, schema, ids);
  const meta = {
    set: info.set,
    cutoff: info.cutoff,
    definitionHash: info.definitionHash,
    dataFingerprint: info.dataFingerprint,
  };
  return new ParquetSink(file, schema, ids, meta);
}

/**
 * Streams a snapshot to Parquet, CSV or Arrow IPC with a manifest beside it. Memory stays
 * constant (one batch of 65,536 rows plus one Parquet row group). Rows come in (series_id,
 * origin, day) order with fixed batch boundaries, so the same snapshot gives the same bytes.
 * The snapshot is pinned (share lock) for the whole read; the file appears only when complete.
 */
export async function exportSnapshot(db: Db, _config: Config, opts: ExportOptions): Promise<ExportResult> {
  const format = opts.format ?? 'parquet';
  if (!EXPORT_FORMATS.includes(format))
    throw new UsageError(`format must be one of ${EXPORT_FORMATS.join(', ')}, got '${format}'`);
  const path = resolve(opts.out);
  const manifestPath = `${path}.manifest.json`;
  // Physical order first (no sort); a table not stored in order is read again sorted, and
  // remembered as such for later exports by this process.
  for (let attempt = 0; ; attempt++) {
    const file = new HashingFile(path);
    let tableKey = '';
    try {
      const manifest = await db.transaction(async (tx) => {
        const info = await pinSnapshot(tx, opts.set, opts.cutoff);
        tableKey = `${db.schema}.${info.tableName}`;
        const layout = exportLayout(info, opts);
        const ids = await loadSeriesIds(tx);
        const sink = openSink(format, file, layout, ids, info);
        let rowCount = 0;
        // The embedded database hands over a whole COPY at once, so a failed order check would
        // cost a full read: it sorts straight away.
        const mode = UNORDERED.has(tableKey) || db.kind === 'embedded' ? 'sorted' : 'physical';
        try {
          for await (const b of readSnapshot(db, tx, layout, mode)) {
            await sink.write(b);
            rowCount += b.length;
          }
          // An empty export is still a valid file: the schema and zero rows.
          if (rowCount === 0) await sink.write(emptyBatch(layout));
          await sink.finish();
        } catch (err) {
          await sink.abort?.();
          throw err;
        }
        return { ...snapshotManifest(info, layout), rowCount };
      });
      const sha256 = file.commit();
      const full: ExportManifest = { ...manifest, file: basename(path), format, bytes: file.bytes, sha256 };
      writeAtomically(manifestPath, `${JSON.stringify(full, null, 2)}\n`);
      return { path, manifestPath, rowCount: manifest.rowCount, sha256 };
    } catch (err) {
      file.discard();
      if (err instanceof OutOfOrderError && attempt === 0) {
        UNORDERED.add(tableKey);
        continue;
      }
      throw err;
    }
  }
}

function emptyBatch(layout: ExportLayout): ExportBatch {
  const columns = layout.copyTypes.map((t) =>
    t === 'float8' ? new Float64Array(0) : t === 'bool' ? new Uint8Array(0) : new Int32Array(0),
  );
  return { length: 0, columns, nulls: columns.map(() => new Uint8Array(0)) };
}

function writeAtomically(path: string, text: string): void {
  const f = new HashingFile(path);
  try {
    f.write(new TextEncoder().encode(text));
    f.commit();
  } catch (err) {
    f.discard();
    throw err;
  }
}
