import { formatDay } from '../core/days.js';

/**
 * Literals for statements that cannot take parameters (COPY). Values come from the database
 * (store ids) or from parsed days, and are quoted by doubling single quotes, which is exact
 * with standard_conforming_strings on (the default since PostgreSQL 9.1).
 */
export function quoteLiteral(value: string): string {
  if (value.includes('\u0000')) throw new Error('a text literal cannot contain NUL');
  return `'${value.replaceAll("'", "''")}'`;
}

/** A date literal from an epoch day. */
export function dayLiteral(day: number): string {
  return `DATE '${formatDay(day)}'`;
}

/** `ARRAY['a','b']::text[]` for a list of text values (empty array allowed). */
export function textArrayLiteral(values: Iterable<string>): string {
  const parts = [...values].map(quoteLiteral);
  return parts.length ? `ARRAY[${parts.join(',')}]::text[]` : `'{}'::text[]`;
}
