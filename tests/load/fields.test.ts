import fc from 'fast-check';
import { isValid, parseISO } from 'date-fns';
import { expect, test } from 'vitest';
import { parseDay } from '../../src/core/days.js';
import {
  DayParser,
  INT4_MAX,
  INT4_MIN,
  parsePriceE4,
  parseUnits,
  priceProblem,
  textProblem,
  unitsProblem,
} from '../../src/load/fields.js';

// int4 range: PostgreSQL documentation, "Numeric Types" (integer: -2147483648 to +2147483647).
test('int4 bounds are the PostgreSQL integer range', () => {
  expect(INT4_MIN).toBe(-(2 ** 31));
  expect(INT4_MAX).toBe(2 ** 31 - 1);
});

test.each([
  ['0', 0],
  ['17', 17],
  ['-3', -3],
  ['+4', 4],
  [' 12 ', 12],
  ['3.0', 3],
  ['3.000', 3],
  ['2147483647', INT4_MAX],
  ['-2147483648', INT4_MIN],
  ['0012', 12],
])('units %j -> %d', (text, value) => {
  expect(parseUnits(text)).toBe(value);
});

test.each([
  ['', 'is empty'],
  ['1.5', 'is not an integer (fractional units cannot be stored)'],
  ['2.50', 'is not an integer (fractional units cannot be stored)'],
  ['2147483648', 'is outside the int4 range'],
  ['-2147483649', 'is outside the int4 range'],
  ['99999999999', 'is outside the int4 range'],
  ['abc', 'is not an integer'],
  ['1e3', 'is not an integer'], // an exponent is not integer text
  ['12a', 'is not an integer'],
  ['-', 'is not an integer'],
  ['1,5', 'is not an integer'],
])('units %j rejected: %s', (text, problem) => {
  expect(parseUnits(text)).toBeNaN();
  expect(unitsProblem(text)).toContain(problem);
});

test('every int4 round-trips through its decimal text; one past either end is refused', () => {
  fc.assert(fc.property(fc.integer({ min: INT4_MIN, max: INT4_MAX }), (n) => parseUnits(String(n)) === n));
  expect(parseUnits(String(INT4_MAX + 1))).toBeNaN();
  expect(parseUnits(String(INT4_MIN - 1))).toBeNaN();
});

test.each([
  ['1.99', 19900],
  ['0.0001', 1],
  ['12', 120000],
  ['-0.5', -5000],
  ['.25', 2500],
  ['3.14150', 31415], // trailing zeros past 4 decimals change nothing
  ['9999999999.9999', 99999999999999],
])('price %j -> %d ten-thousandths', (text, e4) => {
  expect(parsePriceE4(text)).toBe(e4);
});

test.each([
  ['', 'is empty'],
  ['1.23456', 'more than 4 decimals'],
  ['12345678901', 'more than 10 integer digits'],
  ['1,99', 'is not a decimal number'],
  ['$2', 'is not a decimal number'],
  ['.', 'is not a decimal number'],
])('price %j rejected: %s', (text, problem) => {
  expect(parsePriceE4(text)).toBeNaN();
  expect(priceProblem(text)).toContain(problem);
});

test.each([
  ['item_1', null],
  ['it\'em"; DROP TABLE items; --', null], // SQL text is just text: stored, parameterised
  ['x'.repeat(64), null],
  ['é'.repeat(64), null], // 64 characters, 128 bytes
  ['', 'is empty'],
  ['x'.repeat(65), 'is longer than 64 characters'],
  ['a\tb', 'contains a control character (U+0009) at position 2'],
  ['a\u0000', 'contains a control character (U+0000) at position 2'],
  ['\u007f', 'contains a control character (U+007F) at position 1'],
  ['a\u0085', 'contains a control character (U+0085) at position 2'],
])('id %j: %s', (text, problem) => {
  expect(textProblem(text)).toBe(problem);
});

// Gregorian leap-year rule (ISO 8601): 2024 and 2000 are leap years, 2023 and 1900 are not.
// date-fns (parseISO + isValid) is the reference implementation for the same rule.
test.each(['2024-02-29', '2023-02-29', '1900-02-29', '2000-02-29', '2023-04-31', '2023-12-31', '2023-00-10'])(
  'day %s agrees with date-fns',
  (text) => {
    const days = new DayParser();
    const ours = !Number.isNaN(days.parse(text));
    expect(ours).toBe(isValid(parseISO(text)));
    expect(ours).toBe(['2024-02-29', '2000-02-29', '2023-12-31'].includes(text));
    // The cache answers the same the second time.
    expect(!Number.isNaN(days.parse(text))).toBe(ours);
  },
);

test('day parser trims spaces but nothing else of ISO 8601 is relaxed', () => {
  const days = new DayParser();
  expect(days.parse(' 2020-01-05 ')).toBe(parseDay('2020-01-05'));
  for (const bad of ['2020/01/05', '20200105', '2020-1-5', '2020-01-05T00:00', '05.01.2020']) {
    expect(days.parse(bad)).toBeNaN();
  }
});
