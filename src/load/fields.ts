/**
 * Field validators of the data contracts (DESIGN.md, "Data contracts"). Each parser returns NaN
 * (or null) on the hot path and has a `...Problem` twin that explains the failure; the twin runs
 * only for rejected rows, so valid rows pay for no string building.
 */
import { parseDay } from '../core/days.js';

/** Ids are text of 1-64 characters (code points). */
export const MAX_ID_LENGTH = 64;
/** Event names may be longer than ids; the same character rules apply. */
export const MAX_NAME_LENGTH = 256;
export const INT4_MIN = -2147483648;
export const INT4_MAX = 2147483647;
/** numeric(14, 4): at most 10 integer digits and 4 decimals. */
export const PRICE_INT_DIGITS = 10;
export const PRICE_DECIMALS = 4;

/** A value as it appears in a reason text: JSON quoting makes control characters visible. */
export const show = (v: string): string => JSON.stringify(v.length > 80 ? `${v.slice(0, 80)}...` : v);

/** Position of the first C0 control, DEL or C1 control (Unicode category Cc), or -1. */
function controlAt(v: string): number {
  for (let i = 0; i < v.length; i++) {
    const c = v.charCodeAt(i);
    if (c < 32 || (c >= 127 && c <= 159)) return i;
  }
  return -1;
}

/** Why a text is not a valid id (or name of at most `max` characters), or null when it is. */
export function textProblem(v: string, max = MAX_ID_LENGTH): string | null {
  if (v.length === 0) return 'is empty';
  // UTF-16 length >= code points, so the slow count runs only for long values.
  if (v.length > max && [...v].length > max) return `is longer than ${max} characters`;
  const at = controlAt(v);
  if (at >= 0) {
    const cp = v.charCodeAt(at).toString(16).toUpperCase().padStart(4, '0');
    return `contains a control character (U+${cp}) at position ${at + 1}`;
  }
  return null;
}

const isSpace = (c: number) => c === 32 || c === 9;

/** Trims spaces and tabs around numbers and days (the value stays unambiguous). */
function trimmed(v: string): string {
  const n = v.length;
  if (n === 0 || (!isSpace(v.charCodeAt(0)) && !isSpace(v.charCodeAt(n - 1)))) return v;
  return v.trim();
}

/**
 * Parses units: an optional sign, digits, optionally a decimal point followed only by zeros
 * ("3.0" is the integer 3). Returns NaN for anything else or a value outside int4.
 */
export function parseUnits(raw: string): number {
  const v = trimmed(raw);
  const n = v.length;
  let i = 0;
  let neg = false;
  const c0 = v.charCodeAt(0);
  if (c0 === 45 || c0 === 43) {
    neg = c0 === 45;
    i = 1;
  }
  const digitsStart = i;
  let x = 0;
  for (; i < n; i++) {
    const c = v.charCodeAt(i) - 48;
    if (c < 0 || c > 9) break;
    x = x * 10 + c;
  }
  const digits = i - digitsStart;
  if (digits === 0 || digits > 10) return Number.NaN;
  if (i < n) {
    if (v.charCodeAt(i) !== 46) return Number.NaN;
    for (i++; i < n; i++) if (v.charCodeAt(i) !== 48) return Number.NaN;
  }
  const out = neg ? -x : x;
  return out < INT4_MIN || out > INT4_MAX ? Number.NaN : out;
}

/** Why `raw` is not valid units (call only after `parseUnits` returned NaN). */
export function unitsProblem(raw: string): string {
  const v = raw.trim();
  if (v === '') return 'is empty';
  if (/^[+-]?\d+(\.0*)?$/.test(v))
    return `${show(raw)} is outside the int4 range (${INT4_MIN} to ${INT4_MAX})`;
  if (/^[+-]?(\d+\.\d*|\.\d+)$/.test(v))
    return `${show(raw)} is not an integer (fractional units cannot be stored)`;
  return `${show(raw)} is not an integer`;
}

/**
 * Parses a price into an exact integer count of 1/10,000ths (numeric(14, 4) has at most 14
 * digits, so the scaled value is exact in a double). Trailing zeros past 4 decimals are fine.
 */
export function parsePriceE4(raw: string): number {
  const v = trimmed(raw);
  const n = v.length;
  let i = 0;
  let neg = false;
  const c0 = v.charCodeAt(0);
  if (c0 === 45 || c0 === 43) {
    neg = c0 === 45;
    i = 1;
  }
  let intPart = 0;
  let intDigits = 0;
  let seen = false;
  for (; i < n; i++) {
    const c = v.charCodeAt(i) - 48;
    if (c < 0 || c > 9) break;
    seen = true;
    if (intDigits > 0 || c !== 0) intDigits++;
    intPart = intPart * 10 + c;
  }
  if (intDigits > PRICE_INT_DIGITS) return Number.NaN;
  let frac = 0;
  let fracDigits = 0;
  if (i < n) {
    if (v.charCodeAt(i) !== 46) return Number.NaN;
    for (i++; i < n; i++) {
      const c = v.charCodeAt(i) - 48;
      if (c < 0 || c > 9) return Number.NaN;
      seen = true;
      if (fracDigits < PRICE_DECIMALS) {
        frac = frac * 10 + c;
        fracDigits++;
      } else if (c !== 0) return Number.NaN;
    }
  }
  if (!seen) return Number.NaN;
  for (; fracDigits < PRICE_DECIMALS; fracDigits++) frac *= 10;
  const out = intPart * 10 ** PRICE_DECIMALS + frac;
  return neg ? -out : out;
}

/** Why `raw` is not a valid price (call only after `parsePriceE4` returned NaN). */
export function priceProblem(raw: string): string {
  const v = raw.trim();
  if (v === '') return 'is empty';
  if (!/^[+-]?(\d+(\.\d*)?|\.\d+)$/.test(v)) return `${show(raw)} is not a decimal number`;
  const [int = '', frac = ''] = v.replace(/^[+-]/, '').split('.');
  if (frac.replace(/0+$/, '').length > PRICE_DECIMALS)
    return `${show(raw)} has more than ${PRICE_DECIMALS} decimals`;
  if (int.replace(/^0+/, '').length > PRICE_INT_DIGITS) {
    return `${show(raw)} has more than ${PRICE_INT_DIGITS} integer digits (numeric(14, 4))`;
  }
  return `${show(raw)} is not a valid price`;
}

/** Why a day text is invalid. */
export function dayProblem(raw: string): string {
  if (raw.trim() === '') return 'is empty';
  return `${show(raw)} is not a valid ISO 8601 day (YYYY-MM-DD)`;
}

/**
 * Parses ISO 8601 days with a small cache: a file repeats the same few thousand days millions of
 * times, and a Map hit is cheaper than the regex and calendar arithmetic of `parseDay`.
 */
export class DayParser {
  private readonly cache = new Map<string, number>();
  private static readonly LIMIT = 100_000;

  private readonly byNumber = new Map<number, number>();

  /** The epoch day, or NaN when the text is not a valid day (2023-02-29 included). */
  parse(raw: string): number {
    // Fast path for plain YYYY-MM-DD: the digits as one number key an integer map, which cost a
    // third of a string-keyed lookup (a fresh string from the parser must be hashed first).
    if (raw.length === 10 && raw.charCodeAt(4) === 45 && raw.charCodeAt(7) === 45) {
      let key = 0;
      for (let i = 0; i < 10; i++) {
        if (i === 4 || i === 7) continue;
        const c = raw.charCodeAt(i) - 48;
        if (c < 0 || c > 9) {
          key = -1;
          break;
        }
        key = key * 10 + c;
      }
      if (key >= 0) {
        let v = this.byNumber.get(key);
        if (v === undefined) {
          const d = parseDay(raw);
          v = d === null ? Number.NaN : d;
          if (this.byNumber.size < DayParser.LIMIT) this.byNumber.set(key, v);
        }
        return v;
      }
    }
    const hit = this.cache.get(raw);
    if (hit !== undefined) return hit;
    const d = parseDay(trimmed(raw));
    const out = d === null ? Number.NaN : d;
    if (this.cache.size < DayParser.LIMIT) this.cache.set(raw, out);
    return out;
  }
}
