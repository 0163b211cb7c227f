import { once } from 'node:events';
import { createWriteStream, type WriteStream } from 'node:fs';

/**
 * A text file written in large chunks with backpressure: callers append lines to a string
 * buffer (cheap in V8, a rope) and call `maybeFlush` between units of work; the buffer goes to
 * the stream once it passes `chunkChars`, waiting for 'drain' when the stream is full, so memory
 * stays bounded by about two chunks whatever the file size.
 */
export class ChunkWriter {
  private readonly stream: WriteStream;
  private buf = '';
  private failure: Error | undefined;
  /** Lines appended so far (callers count them; the header is line 1). */
  lines = 0;

  constructor(
    readonly path: string,
    private readonly chunkChars = 1 << 20,
  ) {
    this.stream = createWriteStream(path, { encoding: 'utf8', highWaterMark: 1 << 20 });
    this.stream.on('error', (err) => {
      this.failure = err;
    });
  }

  /** Appends one line (without its newline). */
  line(text: string): void {
    this.buf += text + '\n';
    this.lines++;
  }

  /** Appends pre-built text holding `count` lines. */
  text(text: string, count: number): void {
    this.buf += text;
    this.lines += count;
  }

  async maybeFlush(): Promise<void> {
    if (this.buf.length >= this.chunkChars) await this.flush();
  }

  async flush(): Promise<void> {
    if (this.failure) throw this.failure;
    if (this.buf.length === 0) return;
    const chunk = this.buf;
    this.buf = '';
    if (!this.stream.write(chunk)) await once(this.stream, 'drain');
    if (this.failure) throw this.failure;
  }

  async close(): Promise<void> {
    await this.flush();
    await new Promise<void>((resolve, reject) => {
      this.stream.end((err?: Error | null) => (err ? reject(err) : resolve()));
    });
    if (this.failure) throw this.failure;
  }
}
