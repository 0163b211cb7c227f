import fc from 'fast-check';
import { expect, test } from 'vitest';
import { DayBits } from '../../src/load/day-bits.js';

test('matches a Set of (key, day) pairs for any insertion order, across growth in both directions', () => {
  fc.assert(
    fc.property(
      fc.array(fc.tuple(fc.nat(20), fc.integer({ min: -50_000, max: 50_000 })), { maxLength: 400 }),
      (pairs) => {
        const bits = new DayBits();
        const ref = new Set<string>();
        for (const [k, d] of pairs) {
          const id = `${k}:${d}`;
          expect(bits.testAndSet(k, d)).toBe(ref.has(id));
          ref.add(id);
        }
        for (const [k, d] of pairs) {
          expect(bits.has(k, d)).toBe(true);
          expect(bits.has(k, d + 1)).toBe(ref.has(`${k}:${d + 1}`));
        }
      },
    ),
  );
});

test('memory is bits per day spanned, not per row: 30k series x 1,900 days is a few MB', () => {
  const bits = new DayBits();
  for (let s = 0; s < 30_000; s++) for (let d = 18_000; d < 19_900; d += 1) bits.testAndSet(s, d);
  // 1,900 days / 8 = 238 bytes of payload per series; allow the doubling slack.
  expect(bits.bytes).toBeLessThan(30_000 * 600);
});
