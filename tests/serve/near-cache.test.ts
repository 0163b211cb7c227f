import { describe, expect, it } from 'vitest';
import { NearCache } from '../../src/serve/near-cache.js';

const bytes = (...v: number[]) => Uint8Array.from(v);

describe('NearCache', () => {
  it('answers only for the version it holds; asking with another drops every copy of the set', () => {
    const c = new NearCache(16 << 20);
    c.put('daily', 3, 'k1', bytes(1, 2, 3, 4));
    c.put('daily', 3, 'k2', bytes(5, 6, 7, 8));
    c.put('weekly', 9, 'k1', bytes(9, 9, 9, 9));
    expect([...c.get('daily', 3, 'k1')!]).toEqual([1, 2, 3, 4]);
    expect([...c.get('daily', 3, 'k2')!]).toEqual([5, 6, 7, 8]);
    // One block of 4 MB per set so far.
    expect(c.size).toBe(8 << 20);
    // The pointer moved to version 4: nothing of version 3 is served any more, even when asked again.
    expect(c.get('daily', 4, 'k1')).toBeUndefined();
    expect(c.get('daily', 3, 'k2')).toBeUndefined();
    expect(c.size).toBe(4 << 20);
    // Other sets keep theirs.
    expect([...c.get('weekly', 9, 'k1')!]).toEqual([9, 9, 9, 9]);
    // Putting a copy of a newer version also drops the older ones.
    c.put('weekly', 10, 'k2', bytes(1, 1, 1, 1));
    expect(c.get('weekly', 10, 'k1')).toBeUndefined();
    expect([...c.get('weekly', 10, 'k2')!]).toEqual([1, 1, 1, 1]);
  });

  it('holds copies, not views on the buffer it was given', () => {
    const c = new NearCache(1024);
    const socketRead = bytes(0, 1, 2, 3, 4, 5, 6, 7);
    c.put('daily', 1, 'k', socketRead.subarray(2, 6));
    socketRead.fill(0);
    const got = c.get('daily', 1, 'k')!;
    expect([...got]).toEqual([2, 3, 4, 5]);
    expect(got.buffer).not.toBe(socketRead.buffer);
  });

  it('stays within its byte budget, giving up the oldest block first', () => {
    // 12 bytes: one block of three 4-byte copies.
    const c = new NearCache(12);
    for (const [k, v] of [
      ['a', 1],
      ['b', 2],
      ['c', 3],
    ] as const)
      c.put('daily', 1, k, bytes(v, v, v, v));
    expect(c.size).toBe(12);
    expect([...c.get('daily', 1, 'c')!]).toEqual([3, 3, 3, 3]);
    c.put('daily', 1, 'd', bytes(4, 4, 4, 4));
    expect(c.size).toBe(12);
    expect(['a', 'b', 'c'].map((k) => c.get('daily', 1, k))).toEqual([undefined, undefined, undefined]);
    expect([...c.get('daily', 1, 'd')!]).toEqual([4, 4, 4, 4]);
    // Another set's first copy needs a block: the daily one goes.
    c.put('weekly', 1, 'x', bytes(7, 7, 7, 7));
    expect(c.size).toBe(12);
    expect(c.get('daily', 1, 'd')).toBeUndefined();
    expect([...c.get('weekly', 1, 'x')!]).toEqual([7, 7, 7, 7]);
    // A value over the whole budget is not kept.
    c.put('monthly', 1, 'big', new Uint8Array(13));
    expect(c.get('monthly', 1, 'big')).toBeUndefined();
    expect(c.size).toBe(12);
  });

  it('keeps the first copy of a key put twice (copies of one version are equal)', () => {
    const c = new NearCache(100);
    c.put('daily', 1, 'a', bytes(1, 1, 1, 1));
    c.put('daily', 1, 'a', bytes(2, 2, 2, 2));
    expect([...c.get('daily', 1, 'a')!]).toEqual([1, 1, 1, 1]);
    c.put('daily', 1, 'b', bytes(3, 3, 3, 3));
    expect([...c.get('daily', 1, 'b')!]).toEqual([3, 3, 3, 3]);
  });

  it('ignores a late copy of an older version, and follows a pointer moved back', () => {
    const c = new NearCache(100);
    c.put('daily', 5, 'a', bytes(5, 5, 5, 5));
    // A read of version 4 that started before the switch finishes now.
    c.put('daily', 4, 'b', bytes(4, 4, 4, 4));
    expect([...c.get('daily', 5, 'a')!]).toEqual([5, 5, 5, 5]);
    expect(c.get('daily', 5, 'b')).toBeUndefined();
    // The pointer names version 4 again: the reader asks for it, version 5's copies go.
    expect(c.get('daily', 4, 'b')).toBeUndefined();
    c.put('daily', 4, 'b', bytes(4, 4, 4, 4));
    expect([...c.get('daily', 4, 'b')!]).toEqual([4, 4, 4, 4]);
    expect(c.get('daily', 4, 'a')).toBeUndefined();
  });
});
