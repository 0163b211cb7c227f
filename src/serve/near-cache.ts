/**
 * In-process copies of packed matrices a reader has already fetched, for the version its set's
 * pointer names. A version's series keys are written once and never change, so a copy is exact
 * for as long as that version is current; the reader asks with the version it has just resolved
 * from the pointer, and a different version drops every copy of the set before anything is
 * served, so a read never mixes versions and never outlives a switch by more than the pointer's
 * trust period (which applies to Redis reads as well).
 *
 * A read answered here skips the Redis command (its socket write, the reply's parse) and Redis's
 * own work for it. Copies are kept in blocks of up to 4 MB shared by many series (a series is a
 * slot number in a Map), not one buffer each: tens of thousands of small buffers are as many
 * objects for the collector to trace and sweep, and their external memory set off full
 * collections while the copies filled up.
 */
const BLOCK_BYTES = 4 << 20;

interface Block {
  readonly set: SetCopies;
  readonly buf: Buffer;
  readonly keys: string[];
}

interface SetCopies {
  readonly name: string;
  readonly version: number;
  /** Bytes per copy: every vector of one version has the same size. */
  readonly size: number;
  /** Key -> block and slot: `block * slotsPerBlock + slot`. */
  readonly slots: Map<string, number>;
  readonly blocks: Map<number, Block>;
  readonly slotsPerBlock: number;
  next: number;
}

export class NearCache {
  readonly maxBytes: number;
  private bytes = 0;
  private readonly sets = new Map<string, SetCopies>();
  /** Every set's blocks, oldest first (the order they are given up in). */
  private readonly order: Block[] = [];

  /** At most `maxBytes` of blocks in total over every set; the oldest block goes first. */
  constructor(maxBytes: number) {
    this.maxBytes = maxBytes;
  }

  /** Bytes of blocks held now. */
  get size(): number {
    return this.bytes;
  }

  /** The copy of `key` (a series key of `version`), if held and `version` is the set's current one. */
  get(set: string, version: number, key: string): Buffer | undefined {
    const s = this.sets.get(set);
    if (!s) return undefined;
    if (s.version !== version) {
      this.drop(s);
      return undefined;
    }
    const slot = s.slots.get(key);
    if (slot === undefined) return undefined;
    const block = s.blocks.get(Math.floor(slot / s.slotsPerBlock))!;
    const at = (slot % s.slotsPerBlock) * s.size;
    return block.buf.subarray(at, at + s.size);
  }

  /** Keeps a copy of `packed` (the caller's buffer may be a view on a socket read it must not pin). */
  put(set: string, version: number, key: string, packed: Uint8Array): void {
    const n = packed.byteLength;
    let s = this.sets.get(set);
    // A read that resolved the version before a switch finishing after reads of the new one have
    // begun: its copy is not wanted (a reader asking for an older version drops the newer copies
    // in `get` first, so a pointer moved back is followed too).
    if (s && version < s.version) return;
    if (s && (s.version !== version || s.size !== n)) {
      this.drop(s);
      s = undefined;
    }
    if (!s) {
      const perBlock = Math.floor(Math.min(BLOCK_BYTES, this.maxBytes) / Math.max(1, n));
      if (perBlock === 0) return;
      s = {
        name: set,
        version,
        size: n,
        slots: new Map(),
        blocks: new Map(),
        slotsPerBlock: perBlock,
        next: 0,
      };
      this.sets.set(set, s);
    }
    // Copies of one version are equal: a second read of a key that raced the first keeps the first.
    if (s.slots.has(key)) return;
    const b = Math.floor(s.next / s.slotsPerBlock);
    let block = s.blocks.get(b);
    if (!block) {
      const bytes = s.slotsPerBlock * n;
      while (this.bytes + bytes > this.maxBytes && this.order.length) this.release(this.order[0]!);
      block = { set: s, buf: Buffer.allocUnsafeSlow(bytes), keys: [] };
      s.blocks.set(b, block);
      this.order.push(block);
      this.bytes += bytes;
    }
    const slot = s.next++;
    block.buf.set(packed, (slot % s.slotsPerBlock) * n);
    block.keys.push(key);
    s.slots.set(key, slot);
  }

  /** Gives up one block and the copies in it. */
  private release(block: Block): void {
    const s = block.set;
    for (const k of block.keys) s.slots.delete(k);
    for (const [i, b] of s.blocks) {
      if (b === block) {
        s.blocks.delete(i);
        break;
      }
    }
    this.order.splice(this.order.indexOf(block), 1);
    this.bytes -= block.buf.byteLength;
  }

  /** Drops every copy of a set (its version is no longer the one asked for). */
  private drop(s: SetCopies): void {
    for (const b of [...s.blocks.values()]) this.release(b);
    if (this.sets.get(s.name) === s) this.sets.delete(s.name);
  }
}
