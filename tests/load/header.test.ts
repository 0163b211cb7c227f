import { expect, test } from 'vitest';
import { parseDay } from '../../src/core/days.js';
import { InputError } from '../../src/db/errors.js';
import { resolveHeader, sniffDelimiter } from '../../src/load/header.js';

test.each([
  ['item_id,store_id,day,units', ','],
  ['item_id;store_id;day;units', ';'],
  ['item_id\tstore_id\tday\tunits', '\t'],
  ['"a;b",c,d', ','], // delimiters inside quotes do not count
  ['day', ','],
  ['a;b,c;d', ';'],
])('sniff %j -> %j', (line, d) => {
  expect(sniffDelimiter(line)).toBe(d);
});

const opts = { file: 'f.csv' };

test('columns may come in any order and any case; positions follow the header', () => {
  const plan = resolveHeader('sales', ['Units', 'day', ' store_id ', 'ITEM_ID'], opts);
  expect(plan.layout).toBe('long');
  expect(plan.index).toEqual({ units: 0, day: 1, store_id: 2, item_id: 3 });
});

test('wide sales headers are detected, each day column validated', () => {
  const plan = resolveHeader('sales', ['item_id', 'store_id', '2024-02-28', '2024-02-29'], opts);
  expect(plan.layout).toBe('wide');
  expect(plan.dayPositions).toEqual([2, 3]);
  expect(plan.days).toEqual([parseDay('2024-02-28'), parseDay('2024-02-29')]);
  expect(() => resolveHeader('sales', ['item_id', 'store_id', '2023-02-28', '2023-02-29'], opts)).toThrow(
    /column "2023-02-29" is neither item_id, store_id nor a valid ISO 8601 day/,
  );
});

test('config load.columns renames or ignores source columns', () => {
  const plan = resolveHeader('stores', ['Shop', 'region_id', 'opened'], {
    ...opts,
    columnMap: { shop: 'store_id', Opened: null },
  });
  expect(plan.index).toEqual({ store_id: 0, region_id: 1 });
});

test.each([
  [['item_id', 'dept_id'], 'missing required column "category_id"'],
  [['item_id', 'dept_id', 'category_id', 'dept_id'], 'duplicate column "dept_id" (columns 2 and 4)'],
  [['item_id', 'dept_id', 'category_id', 'colour'], 'unknown column "colour"'],
  [['item_id', 'dept_id', 'category_id', ''], 'unknown column ""'],
])('header %j: %s', (header, message) => {
  let err: unknown;
  try {
    resolveHeader('items', header, opts);
  } catch (e) {
    err = e;
  }
  expect(err).toBeInstanceOf(InputError);
  expect((err as Error).message).toContain('f.csv: line 1 (header)');
  expect((err as Error).message).toContain(message);
});

test('a long header given --layout wide, or a wide one given long, says what is wrong', () => {
  expect(() =>
    resolveHeader('sales', ['item_id', 'store_id', 'day', 'units'], { ...opts, layout: 'wide' }),
  ).toThrow(/column "day" is neither/);
  expect(() =>
    resolveHeader('sales', ['item_id', 'store_id', '2020-01-01'], { ...opts, layout: 'long' }),
  ).toThrow(/needs --layout wide/);
  expect(() => resolveHeader('prices', ['item_id'], { ...opts, layout: 'wide' })).toThrow(/sales files only/);
});
