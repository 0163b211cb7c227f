import type { z } from 'zod';
import { parseDay } from '../core/days.js';
import { quoteIdent } from '../db/database.js';
import { checkParams, defineCheck, intAtLeast } from './check-definition.js';
import type { FindingDraft } from './finding.js';

export const duplicateKeysParams = checkParams(['duplicate-row', 'duplicate-key'], {
  /** Most duplicate keys reported per table, so a table loaded twice yields a readable run. */
  maxPerTable: intAtLeast(1, 1000),
});
export type DuplicateKeysParams = z.output<typeof duplicateKeysParams>;

/** The key of each raw table (sql/000001.sql); a table without a unique index on it is scanned. */
export const TABLE_KEYS: Readonly<Record<string, readonly string[]>> = Object.freeze({
  items: ['item_id'],
  stores: ['store_id'],
  series: ['item_id', 'store_id'],
  sales: ['series_id', 'day'],
  prices: ['item_id', 'store_id', 'week_start'],
  calendar_days: ['day'],
  events: ['day', 'name'],
  benefit_days: ['region_id', 'day'],
});

/** Duplicates the loader rejected (with both lines) and duplicates in any raw table whose key has no unique index. */
export const duplicateKeys = defineCheck({
  name: 'duplicate-keys',
  description:
    'rows the loader rejected as duplicates (both lines), and duplicate keys in tables without a key constraint',
  codes: {
    'duplicate-row': {
      severity: 'block',
      meaning: 'a file repeated a key; the loader kept the first line and rejected the other',
    },
    'duplicate-key': { severity: 'block', meaning: 'a stored table holds the same key more than once' },
  },
  params: duplicateKeysParams,
  reads: [],
  async run(db, ctx) {
    // Rejects of batches superseded by a later full replace of the same table no longer apply.
    const rejected = await db.query<RejectedDuplicate>(
      `SELECT r.batch_id, r.file, r.line, r.other_line, r.key, b.target
       FROM rejected_rows r JOIN load_batches b USING (batch_id)
       WHERE r.other_line IS NOT NULL AND b.status = 'loaded'
         AND b.batch_id >= coalesce((SELECT max(x.batch_id) FROM load_batches x
                                     WHERE x.target = b.target AND x.mode = 'replace' AND x.status = 'loaded'), 0)
       ORDER BY r.batch_id, r.line`,
    );
    await ctx.write(
      rejected.rows.map((r): FindingDraft => {
        const k = parseRejectedKey(r.target, r.key);
        return {
          code: 'duplicate-row',
          itemId: k.item_id ?? null,
          storeId: k.store_id ?? null,
          regionId: k.region_id ?? null,
          firstDay: k.day ?? null,
          lastDay: k.day ?? null,
          observed: 2,
          rank: 1,
          details: { file: r.file, line: r.line, other_line: r.other_line, key: r.key, batch_id: r.batch_id },
          message: `${r.file} line ${r.line} repeats the key${r.key ? ` ${r.key}` : ''} of line ${r.other_line} (batch ${r.batch_id})`,
        };
      }),
    );

    const idx = await db.query<{ table: string; cols: string[] }>(
      `SELECT t.relname AS table,
              array(SELECT a.attname::text FROM unnest(i.indkey::int2[]) k
                    JOIN pg_attribute a ON a.attrelid = t.oid AND a.attnum = k) AS cols
       FROM pg_index i
       JOIN pg_class t ON t.oid = i.indrelid
       JOIN pg_namespace n ON n.oid = t.relnamespace
       WHERE n.nspname = current_schema() AND i.indisunique AND i.indpred IS NULL AND t.relname = ANY($1::text[])`,
      [Object.keys(TABLE_KEYS)],
    );
    for (const [table, key] of Object.entries(TABLE_KEYS)) {
      // A unique index on the key (or on part of it) makes duplicates impossible: nothing to scan.
      const guarded = idx.rows.some((r) => r.table === table && r.cols.every((c) => key.includes(c)));
      if (guarded) continue;
      const cols = key.map(quoteIdent).join(', ');
      const keyJson = `jsonb_build_object(${key.map((k) => `'${k}', d.${quoteIdent(k)}::text`).join(', ')})`;
      const isSales = table === 'sales';
      const item = isSales ? 's.item_id' : key.includes('item_id') ? 'd.item_id' : 'NULL';
      const store = isSales ? 's.store_id' : key.includes('store_id') ? 'd.store_id' : 'NULL';
      const dayCol = key.includes('day')
        ? 'd.day'
        : key.includes('week_start')
          ? 'd.week_start'
          : 'NULL::date';
      await ctx.insertFrom(
        'duplicate-key',
        [
          'series_id',
          'item_id',
          'store_id',
          'first_day',
          'last_day',
          'observed',
          'rank',
          'message',
          'details',
        ],
        `SELECT ${isSales ? 'd.series_id' : 'NULL::int4'}, ${item}, ${store}, ${dayCol}, ${dayCol},
           d.copies::float8, d.copies::float8,
           format('%s holds %s rows with key %s', '${table}', d.copies, ${keyJson}::text),
           jsonb_build_object('table', '${table}', 'key', ${keyJson}, 'copies', d.copies)
         FROM (SELECT ${cols}, count(*) AS copies FROM ${quoteIdent(table)} GROUP BY ${cols} HAVING count(*) > 1
               ORDER BY count(*) DESC LIMIT ${ctx.params.maxPerTable}) d
         ${isSales ? 'LEFT JOIN series s ON s.series_id = d.series_id' : ''}`,
      );
    }
  },
});

interface RejectedDuplicate {
  batch_id: number;
  file: string;
  line: number;
  other_line: number;
  key: string | null;
  target: string;
}

export interface KeyParts {
  item_id?: string;
  store_id?: string;
  region_id?: string;
  /** Epoch day of the row's day (sales, calendar, events, benefit days) or week_start (prices). */
  day?: number;
}

/** The loader's key columns per load target, in the order of its JSON key text (DESIGN.md contracts). */
const REJECT_KEY_COLUMNS: Readonly<Record<string, readonly string[]>> = {
  items: ['item_id'],
  stores: ['store_id'],
  calendar: ['day'],
  events: ['day', 'name'],
  benefit_days: ['region_id', 'day'],
  prices: ['item_id', 'store_id', 'week_start'],
  sales: ['item_id', 'store_id', 'day'],
};

/**
 * The ids and day in a rejected row's key: the loader stores it as a JSON array of the key
 * columns in contract order (e.g. `["A1","S1","2024-01-05"]` for sales). Anything else yields
 * no parts, and the finding keeps the raw key text.
 */
export function parseRejectedKey(target: string, key: string | null): KeyParts {
  const cols = REJECT_KEY_COLUMNS[target];
  if (!key || !cols) return {};
  let values: unknown;
  try {
    values = JSON.parse(key);
  } catch {
    return {};
  }
  if (!Array.isArray(values) || values.length !== cols.length) return {};
  const parts: KeyParts = {};
  cols.forEach((c, i) => {
    const v = values[i];
    if (typeof v !== 'string') return;
    if (c === 'day' || c === 'week_start') {
      const d = parseDay(v);
      if (d !== null) parts.day = d;
    } else if (c === 'item_id' || c === 'store_id' || c === 'region_id') {
      parts[c] = v;
    }
  });
  return parts;
}
