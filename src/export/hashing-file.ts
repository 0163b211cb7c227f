import { createHash, type Hash } from 'node:crypto';
import { closeSync, openSync, renameSync, rmSync, writeSync } from 'node:fs';
import { basename, dirname, join } from 'node:path';

/**
 * A file written under a temporary name beside its destination, hashed (SHA-256) as it is written,
 * and renamed into place only when complete: a failed export never leaves a partial file under the
 * final name, nor replaces an earlier good one.
 */
export class HashingFile {
  readonly path: string;
  readonly tempPath: string;
  private fd: number | null;
  private readonly hash: Hash = createHash('sha256');
  bytes = 0;

  constructor(path: string) {
    this.path = path;
    this.tempPath = join(dirname(path), `.${basename(path)}.${process.pid}.${Date.now()}.partial`);
    this.fd = openSync(this.tempPath, 'w');
  }

  write(chunk: Uint8Array): void {
    if (this.fd === null) throw new Error(`${this.path}: write after close`);
    let off = 0;
    while (off < chunk.byteLength) off += writeSync(this.fd, chunk, off, chunk.byteLength - off);
    this.hash.update(chunk);
    this.bytes += chunk.byteLength;
  }

  /** Closes, renames into place and returns the hex SHA-256 of the content. */
  commit(): string {
    if (this.fd === null) throw new Error(`${this.path}: already closed`);
    closeSync(this.fd);
    this.fd = null;
    renameSync(this.tempPath, this.path);
    return this.hash.digest('hex');
  }

  /** Closes and removes the temporary file. */
  discard(): void {
    if (this.fd !== null) closeSync(this.fd);
    this.fd = null;
    rmSync(this.tempPath, { force: true });
  }
}
