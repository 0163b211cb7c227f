import { expect, test } from 'vitest';
import { parseDay } from '../../src/core/days.js';
import { changeInside, type DataChange } from '../../src/jobs/change-log.js';

const d = (s: string) => parseDay(s)!;
const change = (table: string, first: string | null, batchId: number | null = 7): DataChange => ({
  changeId: 1,
  table,
  firstDay: first === null ? null : d(first),
  lastDay: first === null ? null : d(first),
  batchId,
});
const prev = { cutoff: d('2024-06-10'), priceBoundary: d('2024-06-10') };

test.each([
  ['nothing changed', [], null],
  ['a new sales day after the cutoff', [change('sales', '2024-06-11')], null],
  ['a price week after the price boundary', [change('prices', '2024-06-15')], null],
  [
    'a sales correction on the cutoff itself',
    [change('sales', '2024-06-10')],
    'sales of 2024-06-10 changed (load batch 7), on or before 2024-06-10',
  ],
  [
    'a price week inside the boundary',
    [change('sales', '2024-06-11'), change('prices', '2024-06-08')],
    'prices of the week of 2024-06-08 changed (load batch 7), on or before 2024-06-10',
  ],
  ['a write outside the loader', [change('sales', null, null)], 'sales changed outside the loader'],
  ['the hierarchy, whatever its days', [change('items', null)], 'items changed (load batch 7)'],
  ['events, even far ahead', [change('events', '2030-01-01')], 'events changed (load batch 7)'],
])('%s', (_name, changes, want) => {
  expect(changeInside(changes, prev)).toBe(want);
});
