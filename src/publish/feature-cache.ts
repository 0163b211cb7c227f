import { LarderError } from '../db/errors.js';
import { unpackInto } from './layout.js';

/**
 * The few cache operations publish and serve need. Two implementations with the same semantics:
 * Redis (standalone or Cluster, `redis-cache.ts`) and an in-process map for the embedded demo
 * (`memory-cache.ts`). Multi-key operations accept keys of any slots; the Redis implementation
 * groups them by hash tag, because a Cluster refuses one command over several slots.
 */
export interface FeatureCache {
  readonly kind: 'redis' | 'cluster' | 'memory';
  /** True when commands can be sent now; readers go straight to the fallback when false. */
  ready(): boolean;
  /** Waits until connected, up to `timeoutMs`; false if it did not happen. */
  waitReady(timeoutMs: number): Promise<boolean>;
  getString(key: string): Promise<string | null>;
  getBuffer(key: string): Promise<Buffer | null>;
  /** Values in the order of `keys`, null where a key is absent. */
  getBuffers(keys: readonly string[]): Promise<(Buffer | null)[]>;
  getStrings(keys: readonly string[]): Promise<(string | null)[]>;
  /**
   * Values of `keys` that should each hold `floats` packed Float32 values (bulk reads), copied
   * into one array; an absent key or a value of another size is counted in `missing`.
   */
  getPacked(keys: readonly string[], floats: number): Promise<PackedBatch>;
  /** Writes every entry (pipelined), each expiring after `ttlMs` when given. */
  setMany(entries: readonly CacheEntry[], ttlMs?: number): Promise<void>;
  /** How many of `keys` exist. */
  countExisting(keys: readonly string[]): Promise<number>;
  /** Removes the expiry of every key; returns how many had one. */
  persistMany(keys: readonly string[]): Promise<number>;
  /** Sets every key to expire in `seconds` (absent keys are skipped). */
  expireMany(keys: readonly string[], seconds: number): Promise<void>;
  incr(key: string): Promise<number>;
  /** Sets `key` to `value` and returns the previous value, in one atomic command. */
  swap(key: string, value: string): Promise<string | null>;
  /** Deletes keys (tests and cleanup). */
  deleteMany(keys: readonly string[]): Promise<void>;
  close(): Promise<void>;
}

/** Vectors read in bulk: value `i` at float offset `i * floats` of `values`. */
export interface PackedBatch {
  readonly values: Float32Array;
  /** Per key: 1 when its value was there with the expected size, else 0 (its cells are NaN). */
  readonly found: Uint8Array;
  readonly missing: number;
}

/** Copies values into a PackedBatch, as `getPacked` answers. */
export function packBatch(bufs: readonly (Uint8Array | null)[], floats: number): PackedBatch {
  const values = new Float32Array(bufs.length * floats).fill(Number.NaN);
  const found = new Uint8Array(bufs.length);
  let missing = 0;
  bufs.forEach((b, i) => {
    if (b && b.byteLength === floats * 4) {
      unpackInto(b, values, i * floats);
      found[i] = 1;
    } else missing++;
  });
  return { values, found, missing };
}

export type CacheEntry = readonly [key: string, value: Buffer | string];

/** The cache could not be reached or did not answer in time. */
export class CacheUnavailableError extends LarderError {
  constructor(message: string, options?: { cause?: unknown }) {
    super('CACHE_UNAVAILABLE', message, options);
    this.name = 'CacheUnavailableError';
  }
}

/** Appends `value` to the list under `key`, creating it. */
export function pushTo<K, V>(map: Map<K, V[]>, key: K, value: V): void {
  const list = map.get(key);
  if (list) list.push(value);
  else map.set(key, [value]);
}

/** Splits `items` into consecutive chunks of at most `size`. */
export function chunks<T>(items: readonly T[], size: number): T[][] {
  const out: T[][] = [];
  for (let i = 0; i < items.length; i += size) out.push(items.slice(i, i + size));
  return out;
}
