import type { RecordBatch } from 'apache-arrow';
import { type Config, loadConfig } from '../config/config.js';
import { formatDay } from '../core/days.js';
import type { Db } from '../db/database.js';
import { LarderError } from '../db/errors.js';
import { openDatabase } from '../db/open.js';
import { arrowSchema, type SeriesIds, toRecordBatch, unknownSeries } from './arrow-batch.js';
import { exportLayout, type Selection } from './export-layout.js';
import { loadSeriesIds, type SnapshotManifest, snapshotManifest } from './export-snapshot.js';
import { findSnapshot, pinSnapshot } from './snapshot-entry.js';
import { type ExportBatch, readSnapshot } from './snapshot-reader.js';

/** One snapshot row as a plain object: ids and days as text, features as numbers or null. */
export type SnapshotRow = Record<string, string | number | boolean | null>;

export interface OpenSnapshotOptions extends Selection {
  readonly set: string;
  readonly cutoff: string;
  /** An open database (left open); otherwise one is opened from `config` and closed at the end. */
  readonly db?: Db;
  /** Defaults to the config file found in the working directory (and the environment). */
  readonly config?: Config;
}

export interface OpenedSnapshot<T> extends AsyncIterable<T> {
  readonly manifest: SnapshotManifest;
  /** Closes the database when openSnapshot opened it (also done when an iteration ends). */
  close(): Promise<void>;
}

/**
 * Opens a snapshot for reading from TypeScript: the manifest at once, then the rows in
 * (series, origin, day) order as Arrow record batches (`as: 'arrow'`, default) or plain rows.
 * Each iteration reads the snapshot afresh in one transaction, pinned against a rebuild; if the
 * snapshot was rebuilt since it was opened, the iteration fails instead of mixing two builds.
 */
export async function openSnapshot(
  opts: OpenSnapshotOptions & { as?: 'arrow' },
): Promise<OpenedSnapshot<RecordBatch>>;
export async function openSnapshot(
  opts: OpenSnapshotOptions & { as: 'rows' },
): Promise<OpenedSnapshot<SnapshotRow>>;
export async function openSnapshot(
  opts: OpenSnapshotOptions & { as?: 'arrow' | 'rows' },
): Promise<OpenedSnapshot<RecordBatch> | OpenedSnapshot<SnapshotRow>> {
  const own = opts.db === undefined;
  const db = opts.db ?? (await openDatabase(opts.config ?? (await loadConfig()), { migrate: false }));
  let info: Awaited<ReturnType<typeof findSnapshot>>;
  try {
    info = await findSnapshot(db, opts.set, opts.cutoff);
  } catch (err) {
    if (own) await db.close();
    throw err;
  }
  const layout = exportLayout(info, opts);
  const manifest = snapshotManifest(info, layout);
  const schema = arrowSchema(layout.columns);
  let closed = false;
  const close = async () => {
    if (own && !closed) {
      closed = true;
      await db.close();
    }
  };

  async function* batches(): AsyncGenerator<{ ids: SeriesIds; batch: ExportBatch }> {
    if (closed) throw new LarderError('SNAPSHOT_CLOSED', 'the snapshot was closed');
    const chan = new Handoff<{ ids: SeriesIds; batch: ExportBatch }>();
    const work = db
      .transaction(async (tx) => {
        const now = await pinSnapshot(tx, info.set, info.cutoff);
        if (now.snapshotId !== info.snapshotId) {
          throw new LarderError(
            'SNAPSHOT_CHANGED',
            `snapshot ${info.set} ${info.cutoff} was rebuilt since it was opened: open it again`,
          );
        }
        const ids = await loadSeriesIds(tx);
        // Sorted: a caller may have consumed rows before a disorder could be noticed.
        for await (const batch of readSnapshot(db, tx, layout, 'sorted')) {
          if (!(await chan.put({ ids, batch }))) return;
        }
      })
      .then(
        () => chan.close(),
        (err: unknown) => chan.fail(err),
      );
    try {
      for (;;) {
        const next = await chan.take();
        if (next === null) break;
        yield next;
      }
    } finally {
      chan.stop();
      await work;
      await close();
    }
  }

  if (opts.as === 'rows') {
    const names = layout.columns.map((c) => c.name);
    const types = layout.copyTypes;
    return {
      manifest,
      close,
      async *[Symbol.asyncIterator]() {
        for await (const { ids, batch } of batches()) {
          const sid = batch.columns[0] as Int32Array;
          for (let r = 0; r < batch.length; r++) {
            const item = ids.itemText.get(sid[r]!);
            if (item === undefined) throw unknownSeries(sid[r]!);
            const row: SnapshotRow = { item_id: item, store_id: ids.storeText.get(sid[r]!)! };
            for (let c = 1; c < types.length; c++) {
              const v = batch.nulls[c]![r] ? null : batch.columns[c]![r]!;
              const t = types[c];
              row[names[c + 1]!] =
                v === null
                  ? null
                  : t === 'date'
                    ? formatDay(v as number)
                    : t === 'bool'
                      ? v === 1
                      : (v as number);
            }
            yield row;
          }
        }
      },
    };
  }
  return {
    manifest,
    close,
    async *[Symbol.asyncIterator]() {
      for await (const { ids, batch } of batches()) yield toRecordBatch(schema, ids, batch);
    },
  };
}

/** A one-slot handoff between a producer inside a transaction and a consuming iterator. */
class Handoff<T> {
  private item: T | null = null;
  private done = false;
  private stopped = false;
  private error: unknown = undefined;
  private failed = false;
  private wakeTaker: (() => void) | null = null;
  private wakePutter: (() => void) | null = null;

  /** Waits until the consumer took the item; false once the consumer has stopped. */
  async put(item: T): Promise<boolean> {
    if (this.stopped) return false;
    this.item = item;
    this.signalTaker();
    await new Promise<void>((r) => {
      this.wakePutter = r;
    });
    return !this.stopped;
  }

  async take(): Promise<T | null> {
    for (;;) {
      if (this.item !== null) {
        const it = this.item;
        this.item = null;
        this.signalPutter();
        return it;
      }
      if (this.failed) throw this.error;
      if (this.done) return null;
      await new Promise<void>((r) => {
        this.wakeTaker = r;
      });
    }
  }

  close(): void {
    this.done = true;
    this.signalTaker();
  }

  fail(err: unknown): void {
    this.failed = true;
    this.error = err;
    this.signalTaker();
  }

  stop(): void {
    this.stopped = true;
    this.item = null;
    this.signalPutter();
  }

  private signalTaker(): void {
    const w = this.wakeTaker;
    this.wakeTaker = null;
    w?.();
  }

  private signalPutter(): void {
    const w = this.wakePutter;
    this.wakePutter = null;
    w?.();
  }
}
