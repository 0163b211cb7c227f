import { expect, test } from 'vitest';
import { formatDay, isoWeekday, parseDay } from '../../src/core/days.js';

// Gregorian leap-year rule (ISO 8601 uses the Gregorian calendar): divisible by 4, except
// centuries, except centuries divisible by 400.
test.each([
  ['2024-02-29', true],
  ['2023-02-29', false],
  ['1900-02-29', false],
  ['2000-02-29', true],
  ['2023-04-31', false],
  ['2023-13-01', false],
  ['2023-1-01', false],
  ['2023-01-01T00:00', false],
])('%s valid: %s', (text, valid) => {
  expect(parseDay(text) !== null).toBe(valid);
});

test('round trip and weekday', () => {
  // 1970-01-01 is epoch day 0, a Thursday (ISO weekday 4): common practice / POSIX epoch.
  expect(parseDay('1970-01-01')).toBe(0);
  expect(isoWeekday(0)).toBe(4);
  for (let d = -700_000; d < 2_900_000; d += 997) expect(parseDay(formatDay(d))).toBe(d);
  // 2000-01-02 was a Sunday (ISO 8601 example: 1999-W52-7, REFERENCES.md §1 from Kuhn's summary).
  expect(isoWeekday(parseDay('2000-01-02')!)).toBe(7);
});
