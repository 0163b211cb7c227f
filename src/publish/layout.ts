/**
 * The serving layout in Redis (docs/serving.md), as pure functions: key names, the manifest and
 * the packed vectors. Publisher and reader both use these, so they cannot drift apart.
 *
 * Every key but the pointer belongs to one version. A key's hash tag (the text between the first
 * `{` and the next `}`) decides its Redis Cluster slot: series keys are tagged by set, version and
 * store, so a store's series share a slot and can be read with one MGET; the pointer and the
 * manifest carry their own tags.
 */
import { endianness } from 'node:os';

/** Feature columns as the catalogue lists them (`snapshots.columns`). */
export interface ManifestColumn {
  readonly name: string;
  readonly type: string;
  readonly family?: string;
}

/** One store's part of a version: how many series keys were written under its tag. */
export interface ManifestStore {
  readonly store: string;
  readonly series: number;
}

/** What a version holds; written first, read by every reader (immutable once written). */
export interface Manifest {
  readonly format: 1;
  readonly set: string;
  readonly version: number;
  readonly cutoff: string;
  readonly horizon: number;
  readonly mode: string;
  readonly definitionHash: string;
  readonly snapshotId: number;
  readonly columns: readonly ManifestColumn[];
  /** The first target day (`cutoff + 1`); row `h` of a matrix is day `firstDay + h`. */
  readonly firstDay: string;
  readonly series: number;
  readonly stores: readonly ManifestStore[];
  readonly publishedAt: string;
}

/** Key names for one prefix; `prefix` comes from `config.redis.prefix`. */
export class KeyLayout {
  readonly prefix: string;
  constructor(prefix: string) {
    this.prefix = prefix;
  }

  /** The one key naming the current version of a set (a decimal version number). */
  pointer(set: string): string {
    return `${this.prefix}:{${set}}:current`;
  }

  /** Version counter of a set; same tag as the pointer. */
  sequence(set: string): string {
    return `${this.prefix}:{${set}}:seq`;
  }

  manifest(set: string, version: number): string {
    return `${this.prefix}:{${set}:${version}}:manifest`;
  }

  /** A store's item ids in this version, newline-separated (ids never hold control characters). */
  storeIndex(set: string, version: number, store: string): string {
    return `${this.prefix}:{${set}:${version}:${store}}:items`;
  }

  /** One series: the H x F matrix. */
  series(set: string, version: number, store: string, item: string): string {
    return `${this.prefix}:{${set}:${version}:${store}}:s:${item}`;
  }
}

/**
 * The hash tag of a key as Redis Cluster computes it (cluster spec, "Hash tags"): the text between
 * the first `{` and the first `}` after it, if non-empty; otherwise the whole key.
 */
export function hashTag(key: string): string {
  const open = key.indexOf('{');
  if (open < 0) return key;
  const close = key.indexOf('}', open + 1);
  if (close < 0 || close === open + 1) return key;
  return key.slice(open + 1, close);
}

/** The packed format is little-endian: on such a host a vector's bytes are its Float32Array's. */
export const LITTLE_ENDIAN_HOST = endianness() === 'LE';

/**
 * Packs `rows x cols` values (row-major, day by feature) as little-endian Float32; NaN stays NaN
 * (the snapshot's NULL). On a little-endian host this is one typed-array copy.
 */
export function packMatrix(values: ArrayLike<number>): Buffer {
  const out = Buffer.allocUnsafe(values.length * 4);
  if (LITTLE_ENDIAN_HOST) {
    new Float32Array(out.buffer, out.byteOffset, values.length).set(values);
  } else {
    for (let i = 0; i < values.length; i++) out.writeFloatLE(values[i]!, i * 4);
  }
  return out;
}

/**
 * Copies packed vectors into `target` at float offset `at`. Buffers from a socket start at any
 * byte offset, so a Float32Array cannot always view them directly; a byte copy into an aligned
 * array is the cheapest decode.
 */
export function unpackInto(packed: Uint8Array, target: Float32Array, at: number): void {
  if (LITTLE_ENDIAN_HOST) {
    new Uint8Array(target.buffer, target.byteOffset + at * 4, packed.byteLength).set(packed);
    return;
  }
  const view = new DataView(packed.buffer, packed.byteOffset, packed.byteLength);
  for (let i = 0; i < packed.byteLength / 4; i++) target[at + i] = view.getFloat32(i * 4, true);
}

/** Unpacks one matrix into a fresh Float32Array. */
export function unpackMatrix(packed: Uint8Array): Float32Array {
  const out = new Float32Array(packed.byteLength / 4);
  unpackInto(packed, out, 0);
  return out;
}

/** Parses a manifest, refusing anything that is not this format (a foreign key under the prefix). */
export function parseManifest(text: string, key: string): Manifest {
  let m: unknown;
  try {
    m = JSON.parse(text);
  } catch {
    throw new Error(`manifest ${key} is not JSON`);
  }
  const v = m as Partial<Manifest> | null;
  if (v?.format !== 1 || !Array.isArray(v.columns) || !Array.isArray(v.stores) || !v.horizon) {
    throw new Error(`manifest ${key} is not a Larder serving manifest (format 1)`);
  }
  return v as Manifest;
}

/** Splits a store index value into item ids. */
export function splitItems(value: string): string[] {
  return value.length === 0 ? [] : value.split('\n');
}
