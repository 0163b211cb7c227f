import { RecordBatchFileWriter, type Schema } from 'apache-arrow';
import { type SeriesIds, toRecordBatch } from './arrow-batch.js';
import type { HashingFile } from './hashing-file.js';
import type { ExportBatch } from './snapshot-reader.js';

/**
 * Arrow IPC file format (random access; readable by every Arrow implementation), one record
 * batch per decoded batch. The writer's output queue is drained to the file as it fills.
 */
export class ArrowSink {
  private readonly writer = new RecordBatchFileWriter();
  private readonly drained: Promise<void>;

  constructor(
    file: HashingFile,
    private readonly schema: Schema,
    private readonly ids: SeriesIds,
  ) {
    this.drained = (async () => {
      for await (const chunk of this.writer) file.write(chunk);
    })();
  }

  write(b: ExportBatch): void {
    this.writer.write(toRecordBatch(this.schema, this.ids, b));
  }

  async finish(): Promise<void> {
    this.writer.close();
    await this.drained;
  }
}
