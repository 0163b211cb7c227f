import { type Schema, Table, tableToIPC } from 'apache-arrow';
import * as pw from 'parquet-wasm';
import { type SeriesIds, toRecordBatch } from './arrow-batch.js';
import type { HashingFile } from './hashing-file.js';
import type { ExportBatch } from './snapshot-reader.js';

/**
 * Rows per Parquet row group. Readers parallelise and skip by row group; the writer holds one
 * encoded row group in (WebAssembly) memory, about 20-60 MB at 40 float columns.
 */
export const PARQUET_ROW_GROUP_ROWS = 131_072;

/**
 * Parquet through parquet-wasm (the Rust Arrow/Parquet writer compiled to WebAssembly): record
 * batches go in as Arrow IPC, row groups come out as bytes and are written to the file as they
 * are produced. Chosen over the pure-JS hyparquet-writer after measuring both on 200k rows x 42
 * columns here: 260k vs 110k rows/s, and a 2.7x smaller file (dictionary encoding).
 *
 * The file carries no timestamp: `created_by` is fixed and the key-value metadata holds only the
 * snapshot's identity, as a single JSON entry (the writer keeps entries in a hash map, whose order
 * changes from run to run), so the same snapshot gives the same bytes.
 */
export class ParquetSink {
  private controller!: ReadableStreamDefaultController<pw.RecordBatch>;
  private wake: (() => void) | null = null;
  private failure: unknown = null;
  private readonly pumped: Promise<void>;

  constructor(
    file: HashingFile,
    private readonly schema: Schema,
    private readonly ids: SeriesIds,
    metadata: Readonly<Record<string, string>>,
  ) {
    const input = new ReadableStream<pw.RecordBatch>(
      {
        start: (c) => {
          this.controller = c;
        },
        pull: () => this.resume(),
      },
      { highWaterMark: 1 },
    );
    const props = new pw.WriterPropertiesBuilder()
      .setCompression(pw.Compression.SNAPPY)
      .setMaxRowGroupSize(PARQUET_ROW_GROUP_ROWS)
      .setCreatedBy('larder export')
      .setKeyValueMetadata(new Map([['larder.snapshot', JSON.stringify(metadata)]]))
      .build();
    this.pumped = (async () => {
      const out = (await pw.transformParquetStream(input, props)) as ReadableStream<Uint8Array>;
      const reader = out.getReader();
      for (;;) {
        const { done, value } = await reader.read();
        if (done) break;
        file.write(value);
      }
    })().catch((err: unknown) => {
      this.failure = err;
      this.resume();
    });
  }

  private resume(): void {
    const w = this.wake;
    this.wake = null;
    w?.();
  }

  private check(): void {
    if (this.failure !== null) {
      throw new Error(`parquet writer failed: ${(this.failure as Error)?.message ?? String(this.failure)}`, {
        cause: this.failure,
      });
    }
  }

  private enqueueArrow(table: Table): void {
    const wasm = pw.Table.fromIPCStream(tableToIPC(table, 'stream'));
    try {
      for (const rb of wasm.recordBatches()) this.controller.enqueue(rb);
    } finally {
      wasm.free();
    }
  }

  /** Hands one batch to the writer, waiting while it is still busy with the previous one. */
  async write(b: ExportBatch): Promise<void> {
    this.check();
    this.enqueueArrow(new Table([toRecordBatch(this.schema, this.ids, b)]));
    while ((this.controller.desiredSize ?? 1) <= 0 && this.failure === null) {
      await new Promise<void>((r) => {
        this.wake = r;
      });
    }
    this.check();
  }

  async finish(): Promise<void> {
    this.controller.close();
    await this.pumped;
    this.check();
  }
}
