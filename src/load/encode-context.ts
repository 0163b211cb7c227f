import type { CopyBinaryWriter } from '../db/binary-copy.js';

/** A key a duplicate reject waits on: its first line is found by a second pass over the file. */
export interface DupKey {
  /** The key's text columns other than the day, joined by U+0000 (ids cannot contain it). */
  readonly prefix: string;
  readonly day: number;
}

export interface RejectDetail {
  /** The row's key as a JSON array, for rejected_rows.key. */
  readonly key?: string;
  /** The other line of an in-file duplicate, when already known. */
  readonly otherLine?: number;
  /** An in-file duplicate whose first line is still unknown. */
  readonly dup?: DupKey;
}

/** What a row encoder writes to and reports through, during one pass over a file. */
export interface EncodeContext {
  /** Where rows go; null when rows are not written (second pass, or a batch already over its reject limit). */
  readonly writer: CopyBinaryWriter | null;
  /** Rows carry their line number (staging table) as a last int8 column. */
  readonly staged: boolean;
  reject(line: number, reason: string, start: number, end: number, detail?: RejectDetail): undefined;
  /** Second pass only: a row was accepted with this key (prefix and day). */
  readonly accepted: ((prefix: string, day: number, line: number) => void) | null;
  /** A row was written or accepted; tracks the batch's first and last day. */
  noteDay(day: number): void;
  rowsWritten: number;
}

/** Turns the records of one file into COPY rows or rejects. */
export interface RowEncoder {
  record(fields: string[], line: number, start: number, end: number): undefined;
}

export const ragged = (expected: number, got: number) =>
  `wrong number of fields: expected ${expected}, got ${got}`;
