import { describe, expect, it } from 'vitest';
import { NearCache } from '../../src/serve/near-cache.js';

const bytes = (...v: number[]) => Uint8Array.from(v);

describe('NearCache', () => {
  it('answers only for the version it holds; asking with another drops every copy of the set', () => {
    const c = new NearCache(1024);
    c.put('daily', 3, 'k1', bytes(1, 2, 3, 4));
    c.put('daily', 3, 'k2', bytes(5, 6, 7, 8));
    c.put('weekly', 9, 'k1', bytes(9, 9, 9, 9));
    expect([...c.get('daily', 3, 'k1')!]).toEqual([1, 2, 3, 4]);
    expect(c.size).toBe(12);
    // The pointer moved to version 4: nothing of version 3 is served any more, even when asked again.
    expect(c.get('daily', 4, 'k1')).toBeUndefined();
    expect(c.get('daily', 3, 'k2')).toBeUndefined();
    expect(c.size).toBe(4);
    // Other sets keep theirs.
    expect([...c.get('weekly', 9, 'k1')!]).toEqual([9, 9, 9, 9]);
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

  it('stays within its byte budget, dropping the oldest copies first', () => {
    const c = new NearCache(12);
    c.put('daily', 1, 'a', bytes(1, 1, 1, 1));
    c.put('weekly', 1, 'x', bytes(7, 7, 7, 7));
    c.put('daily', 1, 'b', bytes(2, 2, 2, 2));
    c.put('daily', 1, 'c', bytes(3, 3, 3, 3));
    expect(c.size).toBe(12);
    expect(c.get('daily', 1, 'a')).toBeUndefined();
    expect(c.get('weekly', 1, 'x')).toBeDefined();
    expect(c.get('daily', 1, 'c')).toBeDefined();
    // When the set being filled has nothing left to give, other sets' copies go.
    c.put('monthly', 1, 'm', bytes(1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12));
    expect(c.size).toBe(12);
    expect(c.get('weekly', 1, 'x')).toBeUndefined();
    expect(c.get('daily', 1, 'b')).toBeUndefined();
    // A value over the whole budget is not kept.
    c.put('daily', 1, 'big', new Uint8Array(13));
    expect(c.get('daily', 1, 'big')).toBeUndefined();
    expect(c.size).toBe(12);
  });

  it('replaces a key put twice without counting it twice', () => {
    const c = new NearCache(100);
    c.put('daily', 1, 'a', bytes(1, 1, 1, 1));
    c.put('daily', 1, 'a', bytes(2, 2, 2, 2, 2, 2));
    expect(c.size).toBe(6);
    expect([...c.get('daily', 1, 'a')!]).toEqual([2, 2, 2, 2, 2, 2]);
  });
});
