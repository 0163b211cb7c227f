import { LarderError } from '../db/errors.js';

/** One series (and optionally one target day) of a published set. */
export interface ReadRequest {
  readonly set: string;
  readonly item: string;
  readonly store: string;
  /** One target day `YYYY-MM-DD` in `C+1 .. C+H`; all H days when absent. */
  readonly day?: string | undefined;
}

/** One target day's features by name; null where the snapshot had NULL (not computable). */
export interface FeatureRow {
  readonly day: string;
  readonly features: Record<string, number | null>;
}

/** Where a read was answered from: the cache, or the snapshot table in PostgreSQL. */
export type ReadSource = 'cache' | 'fallback';

export interface FeatureRead {
  readonly set: string;
  readonly item: string;
  readonly store: string;
  readonly cutoff: string;
  /** The published version read (from the cache's pointer, or the newest finished publish). */
  readonly version: number;
  readonly source: ReadSource;
  readonly rows: readonly FeatureRow[];
}

/** Why a read went to PostgreSQL. */
export type FallbackReason = 'miss' | 'unavailable' | 'unpublished';

/** Hooks for metrics; every one optional. */
export interface ReaderEvents {
  /** Series read from the cache (the reader's in-process copies included). */
  hit?(n: number): void;
  /** The part of `hit` answered by the reader's in-process copies, without asking the cache. */
  nearHit?(n: number): void;
  miss?(n: number): void;
  fallback?(reason: FallbackReason, n: number): void;
}

/** A batch of series from `readAll`: `values` holds `n` matrices of `horizon x columns.length`. */
export interface SeriesBatch {
  readonly set: string;
  readonly version: number;
  readonly cutoff: string;
  readonly firstDay: string;
  readonly horizon: number;
  readonly columns: readonly string[];
  readonly items: readonly string[];
  readonly stores: readonly string[];
  /** Row-major: series `i`, day `h`, feature `f` at `(i * horizon + h) * columns.length + f`. */
  readonly values: Float32Array;
}

/**
 * Several series as matrices, without per-feature objects (the fast batched read). `values` holds
 * one `horizon x columns.length` matrix per requested series, in request order; NaN marks NULL
 * cells and every cell of a series that is not in the set (`sources[i] === null`).
 */
export interface VectorBatch {
  readonly set: string;
  readonly version: number;
  readonly cutoff: string;
  readonly firstDay: string;
  readonly horizon: number;
  readonly columns: readonly string[];
  readonly values: Float32Array;
  readonly sources: readonly (ReadSource | null)[];
}

/** What a set currently serves (HTTP `GET /v1/sets/:set`). */
export interface SetInfo {
  readonly set: string;
  readonly version: number;
  readonly cutoff: string;
  readonly horizon: number;
  readonly firstDay: string;
  readonly definitionHash: string;
  readonly columns: readonly { readonly name: string; readonly type: string }[];
  readonly series: number;
  readonly source: ReadSource;
}

/** A request the reader cannot answer as asked (HTTP 400). */
export class BadRequestError extends LarderError {
  constructor(message: string) {
    super('BAD_REQUEST', message);
    this.name = 'BadRequestError';
  }
}

/** Neither the cache nor PostgreSQL answered (HTTP 503). */
export class UnavailableError extends LarderError {
  constructor(message: string, options?: { cause?: unknown }) {
    super('UNAVAILABLE', message, options);
    this.name = 'UnavailableError';
  }
}
