/**
 * Header handling: which delimiter a file uses, and how its header maps onto a target's contract
 * columns (config `load.columns` renames or ignores extra columns). Any problem here is a hard file
 * error: without a trustworthy header no row can be stored faithfully.
 */
import { parseDay } from '../core/days.js';
import { InputError } from '../db/errors.js';
import { type Layout, type LoadTarget, TARGETS } from './targets.js';

export type Delimiter = ',' | ';' | '\t';
const CANDIDATES: readonly Delimiter[] = [',', ';', '\t'];

/**
 * Picks the delimiter that occurs most often outside quotes in the header line (ties go to the
 * comma, then the semicolon). A one-column header has none and reads as comma-separated.
 */
export function sniffDelimiter(headerLine: string): Delimiter {
  const counts = [0, 0, 0];
  let quoted = false;
  for (let i = 0; i < headerLine.length; i++) {
    const ch = headerLine[i];
    if (ch === '"') quoted = !quoted;
    else if (!quoted) {
      const k = CANDIDATES.indexOf(ch as Delimiter);
      if (k >= 0) counts[k]!++;
    }
  }
  let best = 0;
  for (let k = 1; k < CANDIDATES.length; k++) if (counts[k]! > counts[best]!) best = k;
  return CANDIDATES[best]!;
}

/** How a file's records map onto the target's columns. */
export interface HeaderPlan {
  readonly layout: Layout;
  /** Fields every record must have. */
  readonly fieldCount: number;
  /** Record position of each contract column (wide sales: item_id and store_id only). */
  readonly index: Readonly<Record<string, number>>;
  /** Wide sales: record positions of the day columns and the epoch day of each. */
  readonly dayPositions: readonly number[];
  readonly days: readonly number[];
}

const norm = (s: string) => s.trim().toLowerCase();

export interface HeaderOptions {
  readonly file: string;
  readonly layout?: Layout | undefined;
  /** Source column -> contract column, or null to ignore the column. */
  readonly columnMap?: Readonly<Record<string, string | null>> | undefined;
}

/** Maps a header record onto the target's contract, or throws an InputError naming the problem. */
export function resolveHeader(
  target: LoadTarget,
  header: readonly string[],
  opts: HeaderOptions,
): HeaderPlan {
  const spec = TARGETS[target];
  const where = `${opts.file}: line 1 (header)`;
  const contract = spec.columns.map((c) => c.name);
  const map = new Map<string, string | null>();
  for (const [from, to] of Object.entries(opts.columnMap ?? {}))
    map.set(norm(from), to === null ? null : norm(to));

  const names: Array<string | null> = header.map((h, i) => {
    const n = norm(i === 0 ? h.replace(/^\uFEFF/, '') : h);
    return map.has(n) ? map.get(n)! : n;
  });
  const seen = new Map<string, number>();
  names.forEach((n, i) => {
    if (n === null) return;
    const first = seen.get(n);
    if (first !== undefined) {
      throw new InputError(
        `${where}: duplicate column ${JSON.stringify(n)} (columns ${first + 1} and ${i + 1})`,
      );
    }
    seen.set(n, i);
  });

  let layout: Layout = 'long';
  if (target === 'sales') {
    const looksLong = seen.has('day') || seen.has('units');
    const hasDays = names.some((n) => n !== null && /^\d{4}-\d{2}-\d{2}$/.test(n));
    layout = opts.layout ?? (!looksLong && hasDays ? 'wide' : 'long');
  } else if (opts.layout === 'wide') {
    throw new InputError(`${opts.file}: the wide layout applies to sales files only`);
  }
  const required = layout === 'wide' ? ['item_id', 'store_id'] : contract;
  const index: Record<string, number> = {};
  const dayPositions: number[] = [];
  const days: number[] = [];
  const mapHint = `(map or ignore extra columns in config load.columns.${target})`;
  names.forEach((n, i) => {
    if (n === null) return;
    if (required.includes(n)) {
      index[n] = i;
      return;
    }
    if (layout === 'wide') {
      const d = parseDay(n);
      if (d === null) {
        throw new InputError(
          `${where}: column ${JSON.stringify(header[i])} is neither item_id, store_id nor a valid ISO 8601 day ` +
            `(wide layout: item_id, store_id, <YYYY-MM-DD>, ...) ${mapHint}`,
        );
      }
      dayPositions.push(i);
      days.push(d);
      return;
    }
    const hint =
      target === 'sales' && /^\d{4}-\d{2}-\d{2}$/.test(n) ? '; a wide sales file needs --layout wide' : '';
    throw new InputError(
      `${where}: unknown column ${JSON.stringify(header[i])} (expected ${contract.join(', ')}) ${mapHint}${hint}`,
    );
  });
  const missing = required.filter((c) => index[c] === undefined);
  if (missing.length > 0) {
    throw new InputError(
      `${where}: missing required column${missing.length > 1 ? 's' : ''} ${missing.map((m) => JSON.stringify(m)).join(', ')} ` +
        `(header has: ${header.join(', ')})`,
    );
  }
  if (layout === 'wide' && dayPositions.length === 0) {
    throw new InputError(`${where}: a wide sales file needs at least one day column (YYYY-MM-DD)`);
  }
  return Object.freeze({ layout, fieldCount: header.length, index, dayPositions, days });
}
