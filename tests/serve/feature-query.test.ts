import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { featureQuerySchema, wellFormedQuery } from '../../src/serve/http-server.js';

// The reference is the zod schema the route validates with: the quick check may only accept what
// the schema accepts, with the same result, and must accept every ordinary query.
const value = fc.oneof(
  fc.string({ maxLength: 70 }),
  fc.constantFrom(
    '',
    'PANTRY-00001',
    'ST-001',
    '2024-04-01',
    '2024-4-1',
    'a\u0007b',
    'x'.repeat(64),
    'x'.repeat(65),
  ),
  fc.array(fc.constantFrom('a', 'b'), { minLength: 2, maxLength: 2 }),
);
const query = fc.dictionary(fc.constantFrom('item', 'store', 'day', 'dya', 'items'), value);

describe('wellFormedQuery', () => {
  it('agrees with featureQuerySchema wherever it answers', () => {
    fc.assert(
      fc.property(query, (q) => {
        const quick = wellFormedQuery(q);
        const ref = featureQuerySchema.safeParse(q);
        if (quick !== null) expect(ref.success && ref.data).toEqual(quick);
        else if (ref.success) expect.unreachable(`schema accepts ${JSON.stringify(q)}, quick check does not`);
      }),
      { numRuns: 3000 },
    );
  });

  it('takes the ordinary queries', () => {
    expect(wellFormedQuery({ item: 'PANTRY-00001', store: 'ST-001' })).toEqual({
      item: 'PANTRY-00001',
      store: 'ST-001',
    });
    expect(wellFormedQuery({ item: 'é', store: 'ST 1', day: '2024-04-01' })).toEqual({
      item: 'é',
      store: 'ST 1',
      day: '2024-04-01',
    });
    expect(wellFormedQuery(Object.assign(Object.create(null), { item: 'a', store: 'b' }))).toEqual({
      item: 'a',
      store: 'b',
    });
  });
});
