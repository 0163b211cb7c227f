import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { featureReadJson } from '../../src/serve/read-json.js';
import type { FeatureRead } from '../../src/serve/read-types.js';

// The reference is the platform's JSON.stringify: the fast writer must print the same text.
const read = (features: Record<string, number | null>[], item = 'PANTRY-00001'): FeatureRead => ({
  set: 'daily',
  item,
  store: 'ST-001',
  cutoff: '2024-03-31',
  version: 7,
  source: 'cache',
  rows: features.map((f, i) => ({ day: `2024-04-0${i + 1}`, features: f })),
});

describe('featureReadJson', () => {
  it('prints what JSON.stringify prints, for any float32 values and nulls', () => {
    fc.assert(
      fc.property(
        fc.array(
          fc.record({
            lag_7: fc.option(fc.float({ noDefaultInfinity: true, noNaN: true }), { nil: null }),
            mean_28: fc.option(fc.float({ noDefaultInfinity: true, noNaN: true }), { nil: null }),
            dow: fc.integer({ min: 1, max: 7 }),
          }),
          { minLength: 1, maxLength: 5 },
        ),
        fc.string(),
        (rows, item) => {
          const r = read(rows, item);
          expect(featureReadJson(r)).toBe(JSON.stringify(r));
        },
      ),
    );
  });

  it('prints non-finite values as null, as JSON.stringify does', () => {
    const r = read([{ a: Number.POSITIVE_INFINITY, b: Number.NaN, c: -0, d: 1e-45 }]);
    expect(featureReadJson(r)).toBe(JSON.stringify(r));
    expect(JSON.parse(featureReadJson(r)).rows[0].features).toEqual({ a: null, b: null, c: 0, d: 1e-45 });
  });

  it('falls back to JSON.stringify for names that are not identifiers', () => {
    const r = read([{ 'odd"name': 1, "it's": 2 } as Record<string, number>]);
    expect(featureReadJson(r)).toBe(JSON.stringify(r));
  });
});
