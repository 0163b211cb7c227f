import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { packMatrix } from '../../src/publish/layout.js';
import { featureReadJson, packedReadJson } from '../../src/serve/read-json.js';
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

describe('packedReadJson', () => {
  const names = ['lag_7', 'mean_28', 'dow'];
  const days = ['2024-04-01', '2024-04-02', '2024-04-03', '2024-04-04'];
  const head = { set: 'daily', item: 'PANTRY-00001', store: 'ST-001', cutoff: '2024-03-31', version: 7 };
  /** The reference: each cell read with Buffer#readFloatLE, NaN as null, printed by JSON.stringify. */
  const reference = (packed: Buffer, h: number | null) =>
    JSON.stringify({
      ...head,
      source: 'cache',
      rows: days
        .map((day, r) => ({
          day,
          features: Object.fromEntries(
            names.map((n, f) => {
              const v = packed.readFloatLE((r * names.length + f) * 4);
              return [n, Number.isNaN(v) ? null : v];
            }),
          ),
        }))
        .filter((_, r) => h === null || r === h),
    });

  it('prints what JSON.stringify prints of the decoded matrix, one day or all, at any byte offset', () => {
    fc.assert(
      fc.property(
        fc.array(fc.oneof(fc.float(), fc.constant(Number.NaN)), {
          minLength: days.length * names.length,
          maxLength: days.length * names.length,
        }),
        fc.option(fc.integer({ min: 0, max: days.length - 1 }), { nil: null }),
        fc.integer({ min: 0, max: 3 }),
        (values, h, shift) => {
          // A socket buffer holds a value at any offset: aligned ones are viewed, others copied.
          const packed = Buffer.concat([Buffer.alloc(shift), packMatrix(values)]).subarray(shift);
          expect(packedReadJson({ ...head, names, days }, packed, h)).toBe(reference(packed, h));
        },
      ),
    );
  });

  it('equals featureReadJson of the same read', () => {
    const values = Array.from({ length: days.length * names.length }, (_, i) => (i % 5 ? i / 3 : Number.NaN));
    const packed = packMatrix(values);
    const rows = days.map((day, r) => ({
      day,
      features: Object.fromEntries(
        names.map((n, f) => {
          const v = Math.fround(values[r * names.length + f]!);
          return [n, Number.isNaN(v) ? null : v];
        }),
      ),
    }));
    expect(packedReadJson({ ...head, names, days }, packed, null)).toBe(
      featureReadJson({ ...head, source: 'cache', rows }),
    );
    expect(packedReadJson({ ...head, names, days }, packed, 2)).toBe(
      featureReadJson({ ...head, source: 'cache', rows: [rows[2]!] }),
    );
  });
});
