import { type CacheEntry, type FeatureCache, packBatch } from './feature-cache.js';

interface Slot {
  value: Buffer;
  /** Epoch ms, or 0 for no expiry. */
  expiresAt: number;
}

/** Stores shared by name, so a publish and a reader in one process see the same data. */
const STORES = new Map<string, Map<string, Slot>>();

/**
 * The in-process cache for the embedded demo (no REDIS_URL): the same operations and semantics as
 * Redis (expiry, PERSIST counting keys that had an expiry, atomic SET ... GET), held in a Map.
 */
export function createMemoryCache(name = 'default'): FeatureCache {
  let store = STORES.get(name);
  if (!store) {
    store = new Map();
    STORES.set(name, store);
  }
  const map = store;
  const live = (key: string): Slot | undefined => {
    const slot = map.get(key);
    if (!slot) return undefined;
    if (slot.expiresAt !== 0 && slot.expiresAt <= Date.now()) {
      map.delete(key);
      return undefined;
    }
    return slot;
  };
  const toBuffer = (v: Buffer | string) => (typeof v === 'string' ? Buffer.from(v) : Buffer.from(v));
  return {
    kind: 'memory',
    ready: () => true,
    waitReady: async () => true,
    async getString(key) {
      return live(key)?.value.toString() ?? null;
    },
    async getBuffer(key) {
      return live(key)?.value ?? null;
    },
    async getBuffers(keys) {
      return keys.map((k) => live(k)?.value ?? null);
    },
    async getPacked(keys, floats) {
      return packBatch(
        keys.map((k) => live(k)?.value ?? null),
        floats,
      );
    },
    async getStrings(keys) {
      return keys.map((k) => live(k)?.value.toString() ?? null);
    },
    async setMany(entries: readonly CacheEntry[], ttlMs?: number) {
      const expiresAt = ttlMs ? Date.now() + ttlMs : 0;
      for (const [k, v] of entries) map.set(k, { value: toBuffer(v), expiresAt });
    },
    async countExisting(keys) {
      let n = 0;
      for (const k of keys) if (live(k)) n++;
      return n;
    },
    async persistMany(keys) {
      let n = 0;
      for (const k of keys) {
        const slot = live(k);
        if (slot && slot.expiresAt !== 0) {
          slot.expiresAt = 0;
          n++;
        }
      }
      return n;
    },
    async expireMany(keys, seconds) {
      const at = Date.now() + seconds * 1000;
      for (const k of keys) {
        const slot = live(k);
        if (slot) slot.expiresAt = at;
      }
      // An old version is expired once per publish: sweep what has lapsed so far, so a long
      // session does not keep every version it ever published.
      for (const k of [...map.keys()]) live(k);
    },
    async incr(key) {
      const cur = live(key);
      const next = (cur ? Number(cur.value.toString()) : 0) + 1;
      map.set(key, { value: Buffer.from(String(next)), expiresAt: cur?.expiresAt ?? 0 });
      return next;
    },
    async swap(key, value) {
      const prev = live(key)?.value.toString() ?? null;
      map.set(key, { value: Buffer.from(value), expiresAt: 0 });
      return prev;
    },
    async deleteMany(keys) {
      for (const k of keys) map.delete(k);
    },
    async close() {},
  };
}
