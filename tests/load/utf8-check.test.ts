import fc from 'fast-check';
import { expect, test } from 'vitest';
import { firstInvalid, Utf8Check } from '../../src/load/utf8-check.js';

/** Runs the checker over `bytes` cut into chunks at `cuts`; returns -1 or the offset of the first bad byte. */
function check(bytes: Uint8Array, cuts: number[]): number {
  const c = new Utf8Check();
  let prev = 0;
  for (const at of [...cuts.filter((x) => x > 0 && x < bytes.length).sort((a, b) => a - b), bytes.length]) {
    const r = c.push(Buffer.from(bytes.subarray(prev, at)));
    if (r >= 0) return r;
    prev = at;
  }
  return c.end();
}

// The reference is WHATWG TextDecoder with fatal: true (the Encoding standard's UTF-8 decoder,
// which follows RFC 3629's well-formed byte sequences).
const valid = (b: Uint8Array) => {
  try {
    new TextDecoder('utf-8', { fatal: true }).decode(b);
    return true;
  } catch {
    return false;
  }
};

test('agrees with a fatal TextDecoder on random bytes, wherever the chunks are cut', () => {
  const interesting = fc.constantFrom(
    0x41,
    0x0a,
    0x80,
    0xbf,
    0xc0,
    0xc2,
    0xdf,
    0xe0,
    0xed,
    0xef,
    0xf0,
    0xf4,
    0xf5,
    0xff,
  );
  fc.assert(
    fc.property(
      fc.array(fc.oneof(interesting, fc.integer({ min: 0, max: 255 })), { maxLength: 40 }),
      fc.array(fc.nat(40), { maxLength: 6 }),
      (arr, cuts) => {
        const b = Uint8Array.from(arr);
        const r = check(b, cuts);
        expect(r < 0).toBe(valid(b));
        if (r >= 0) expect(valid(b.subarray(0, r))).toBe(true); // everything before the offset is fine
      },
    ),
    { numRuns: 3000 },
  );
});

test('valid text survives any cut, including inside 2-, 3- and 4-byte sequences', () => {
  fc.assert(
    fc.property(
      fc.string({ unit: 'grapheme', maxLength: 30 }),
      fc.array(fc.nat(120), { maxLength: 8 }),
      (s, cuts) => {
        expect(check(new TextEncoder().encode(s), cuts)).toBe(-1);
      },
    ),
  );
});

test.each([
  [[0x61, 0xc3, 0x28], 1], // RFC 3629: a lead byte without its continuation
  [[0x61, 0x62, 0xc0, 0xaf], 2], // overlong encoding of '/'
  [[0xed, 0xa0, 0x80], 0], // UTF-16 surrogate D800 encoded in UTF-8
  [[0xf4, 0x90, 0x80, 0x80], 0], // past U+10FFFF
  [[0x41, 0xe4, 0xb8], 1], // truncated at the end of the stream
])('bad bytes %j at %d', (bytes, at) => {
  expect(check(Uint8Array.from(bytes), [])).toBe(at);
  expect(firstInvalid(Uint8Array.from(bytes), 0, bytes.length)).toBe(at);
});
