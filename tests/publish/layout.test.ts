import { describe, expect, it } from 'vitest';
import {
  hashTag,
  KeyLayout,
  packMatrix,
  parseManifest,
  splitItems,
  unpackInto,
  unpackMatrix,
} from '../../src/publish/layout.js';
import { parseRedisTarget } from '../../src/publish/redis-cache.js';

describe('hashTag', () => {
  // Examples from the Redis Cluster specification, section "Hash tags".
  it.each([
    ['{user1000}.following', 'user1000'],
    ['{user1000}.followers', 'user1000'],
    ['foo{}{bar}', 'foo{}{bar}'],
    ['foo{{bar}}zap', '{bar'],
    ['foo{bar}{zap}', 'bar'],
    ['plain', 'plain'],
  ])('%s -> %s', (key, tag) => expect(hashTag(key)).toBe(tag));

  it('tags series keys by set, version and store; pointer and manifest on their own', () => {
    const l = new KeyLayout('larder');
    expect(l.series('daily', 7, 'ST-001', 'PANTRY-1')).toBe('larder:{daily:7:ST-001}:s:PANTRY-1');
    expect(hashTag(l.series('daily', 7, 'ST-001', 'PANTRY-1'))).toBe('daily:7:ST-001');
    expect(hashTag(l.storeIndex('daily', 7, 'ST-001'))).toBe('daily:7:ST-001');
    expect(hashTag(l.pointer('daily'))).toBe('daily');
    expect(hashTag(l.sequence('daily'))).toBe('daily');
    expect(hashTag(l.manifest('daily', 7))).toBe('daily:7');
  });
});

describe('packed vectors', () => {
  it('are little-endian IEEE 754 binary32, as Node writeFloatLE writes them, NaN kept', () => {
    const values = [0, -0, 1.1, -3.4e38, 1e-45, Number.NaN, 123456.789, Number.POSITIVE_INFINITY];
    const packed = packMatrix(values);
    const ref = Buffer.alloc(values.length * 4);
    for (const [i, v] of values.entries()) ref.writeFloatLE(v, i * 4);
    expect(packed.equals(ref)).toBe(true);
    const back = unpackMatrix(packed);
    expect(Array.from(back)).toEqual(values.map((v) => Math.fround(v)));
  });

  it('unpack from any byte offset (socket buffers are not aligned)', () => {
    const packed = packMatrix([1.5, 2.5, 3.5]);
    const shifted = Buffer.concat([Buffer.from([9]), packed]).subarray(1);
    expect(shifted.byteOffset % 4).not.toBe(0);
    const target = new Float32Array(6);
    unpackInto(shifted, target, 3);
    expect(Array.from(target)).toEqual([0, 0, 0, 1.5, 2.5, 3.5]);
  });
});

describe('manifest and index values', () => {
  it('refuses a value that is not a format-1 manifest, naming the key', () => {
    expect(() => parseManifest('nope', 'k1')).toThrow('manifest k1 is not JSON');
    expect(() => parseManifest('{"format":2}', 'k2')).toThrow(
      'manifest k2 is not a Larder serving manifest (format 1)',
    );
  });
  it('splits store indexes', () => {
    expect(splitItems('')).toEqual([]);
    expect(splitItems('A\nB')).toEqual(['A', 'B']);
  });
});

describe('parseRedisTarget', () => {
  it('tells one server from a cluster', () => {
    expect(parseRedisTarget('redis://127.0.0.1:6379')).toMatchObject({
      cluster: false,
      url: 'redis://127.0.0.1:6379',
    });
    expect(parseRedisTarget('redis://:pw@10.0.0.1:7000,10.0.0.2:7001')).toMatchObject({
      cluster: true,
      password: 'pw',
      nodes: [
        { host: '10.0.0.1', port: 7000 },
        { host: '10.0.0.2', port: 7001 },
      ],
    });
    expect(parseRedisTarget('redis-cluster://h:7000')).toMatchObject({
      cluster: true,
      nodes: [{ host: 'h', port: 7000 }],
    });
  });
  it('names a malformed url without its password', () => {
    expect(() => parseRedisTarget('http://user:secret@h:1')).toThrow(
      "redis url 'http://***@h:1' is not of the form redis://host:port",
    );
  });
});
