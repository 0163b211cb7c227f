/**
 * Days as integers: epoch days (days since 1970-01-01, proleptic Gregorian, no time zone).
 * Pure code works on these; SQL sees ISO 8601 text or binary dates.
 */
const DAY_RE = /^(\d{4})-(\d{2})-(\d{2})$/;

/** Gregorian leap-year rule (ISO 8601): every 4th year, except centuries not divisible by 400. */
export function isLeapYear(y: number): boolean {
  return (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0;
}

const MONTH_DAYS = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];

export function daysInMonth(y: number, m: number): number {
  return m === 2 && isLeapYear(y) ? 29 : MONTH_DAYS[m - 1]!;
}

/** Epoch day of a civil date (Howard Hinnant's days_from_civil algorithm, public domain). */
export function fromCivil(y: number, m: number, d: number): number {
  const yy = m <= 2 ? y - 1 : y;
  const era = Math.floor(yy / 400);
  const yoe = yy - era * 400;
  const mp = (m + 9) % 12;
  const doy = Math.floor((153 * mp + 2) / 5) + d - 1;
  const doe = yoe * 365 + Math.floor(yoe / 4) - Math.floor(yoe / 100) + doy;
  return era * 146097 + doe - 719468;
}

/** Civil date of an epoch day. */
export function toCivil(day: number): { y: number; m: number; d: number } {
  const z = day + 719468;
  const era = Math.floor(z / 146097);
  const doe = z - era * 146097;
  const yoe = Math.floor(
    (doe - Math.floor(doe / 1460) + Math.floor(doe / 36524) - Math.floor(doe / 146096)) / 365,
  );
  const doy = doe - (365 * yoe + Math.floor(yoe / 4) - Math.floor(yoe / 100));
  const mp = Math.floor((5 * doy + 2) / 153);
  const d = doy - Math.floor((153 * mp + 2) / 5) + 1;
  const m = mp < 10 ? mp + 3 : mp - 9;
  return { y: yoe + era * 400 + (m <= 2 ? 1 : 0), m, d };
}

/** Parses a strict `YYYY-MM-DD`; returns null for anything else, including 2023-02-29. */
export function parseDay(text: string): number | null {
  const m = DAY_RE.exec(text);
  if (!m) return null;
  const y = Number(m[1]);
  const mo = Number(m[2]);
  const d = Number(m[3]);
  if (y < 1 || mo < 1 || mo > 12 || d < 1 || d > daysInMonth(y, mo)) return null;
  return fromCivil(y, mo, d);
}

/** Like `parseDay` but throws, naming what was wrong. */
export function day(text: string): number {
  const v = parseDay(text);
  if (v === null) throw new Error(`'${text}' is not a valid ISO 8601 day (YYYY-MM-DD)`);
  return v;
}

const pad2 = (n: number) => (n < 10 ? `0${n}` : String(n));

export function formatDay(day: number): string {
  const { y, m, d } = toCivil(day);
  return `${String(y).padStart(4, '0')}-${pad2(m)}-${pad2(d)}`;
}

/** ISO weekday: 1 = Monday ... 7 = Sunday. 1970-01-01 was a Thursday. */
export function isoWeekday(day: number): number {
  return ((((day + 3) % 7) + 7) % 7) + 1;
}
