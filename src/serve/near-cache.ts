/**
 * In-process copies of packed matrices a reader has already fetched, for the version its set's
 * pointer names. A version's series keys are written once and never change, so a copy is exact
 * for as long as that version is current; the reader asks with the version it has just resolved
 * from the pointer, and a different version drops every copy of the set before anything is
 * served, so a read never mixes versions and never outlives a switch by more than the pointer's
 * trust period (which applies to Redis reads as well).
 *
 * A read answered here skips the Redis command (its socket write, the reply's parse) and Redis's
 * own work for it; on a 2-core machine shared by server, Redis and callers that is most of what
 * a one-day read costs beyond the HTTP exchange itself.
 */
export class NearCache {
  readonly maxBytes: number;
  private bytes = 0;
  private readonly sets = new Map<string, { version: number; entries: Map<string, Buffer> }>();

  /** `maxBytes` of vector payload kept in total over every set; the oldest copies go first. */
  constructor(maxBytes: number) {
    this.maxBytes = maxBytes;
  }

  /** Bytes held now (payload only). */
  get size(): number {
    return this.bytes;
  }

  /** The entries of `set` at `version`; a version other than the one held drops the set's copies. */
  private entries(set: string, version: number): Map<string, Buffer> {
    let s = this.sets.get(set);
    if (s && s.version === version) return s.entries;
    if (s) for (const b of s.entries.values()) this.bytes -= b.byteLength;
    s = { version, entries: new Map() };
    this.sets.set(set, s);
    return s.entries;
  }

  /** The copy of `key` (a series key of `version`), if held and `version` is the set's current one. */
  get(set: string, version: number, key: string): Buffer | undefined {
    return this.entries(set, version).get(key);
  }

  /** Keeps a copy of `packed` (the caller's buffer may be a view on a socket read it must not pin). */
  put(set: string, version: number, key: string, packed: Uint8Array): void {
    const n = packed.byteLength;
    if (n > this.maxBytes) return;
    const entries = this.entries(set, version);
    const old = entries.get(key);
    if (old) {
      this.bytes -= old.byteLength;
      entries.delete(key);
    }
    this.evict(n, entries);
    // Outside the shared pool: a pooled slice would keep the pool's whole 8 kB slab alive.
    const copy = Buffer.allocUnsafeSlow(n);
    copy.set(packed);
    entries.set(key, copy);
    this.bytes += n;
  }

  /** Frees room for `n` bytes: oldest copies of the set being filled first, then of the others. */
  private evict(n: number, first: Map<string, Buffer>): void {
    if (this.bytes + n <= this.maxBytes) return;
    const order = [first, ...[...this.sets.values()].map((s) => s.entries).filter((e) => e !== first)];
    for (const entries of order) {
      for (const [k, b] of entries) {
        if (this.bytes + n <= this.maxBytes) return;
        entries.delete(k);
        this.bytes -= b.byteLength;
      }
    }
  }
}
