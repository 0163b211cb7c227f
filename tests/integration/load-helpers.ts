import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll } from 'vitest';
import type { DbSession } from '../../src/db/database.js';

/** A temp folder for a test file's CSVs, removed afterwards. */
export function useTempDir(prefix: string): (name: string, content: string | Buffer) => string {
  const dir = mkdtempSync(join(tmpdir(), prefix));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));
  return (name, content) => {
    const path = join(dir, name);
    writeFileSync(path, content);
    return path;
  };
}

/** The raw tables as canonical text rows; sales and series by text ids, so surrogate ids may differ. */
const DUMPS: Record<string, string> = {
  items: 'SELECT item_id, dept_id, category_id FROM items',
  stores: 'SELECT store_id, region_id FROM stores',
  series: 'SELECT item_id, store_id FROM series',
  sales: 'SELECT sr.item_id, sr.store_id, s.day, s.units FROM sales s JOIN series sr USING (series_id)',
  prices: 'SELECT item_id, store_id, week_start, price FROM prices',
  calendar_days: 'SELECT day FROM calendar_days',
  events: 'SELECT day, name, kind FROM events',
  benefit_days: 'SELECT region_id, day FROM benefit_days',
};

/** One md5 per raw table over its rows in a fixed order (plus the row count). */
export async function checksums(db: DbSession): Promise<Record<string, string>> {
  const out: Record<string, string> = {};
  for (const [table, select] of Object.entries(DUMPS)) {
    const r = await db.query<{ n: number; md5: string }>(
      `SELECT count(*)::int8 AS n, md5(coalesce(string_agg(t::text, '|' ORDER BY t::text), '')) AS md5 FROM (${select}) t`,
    );
    out[table] = `${r.rows[0]!.n}:${r.rows[0]!.md5}`;
  }
  // The surrogate keys too: a failed load must not renumber or add series.
  const ids = await db.query<{ md5: string }>(
    "SELECT md5(coalesce(string_agg(series_id || ':' || item_id || ':' || store_id, '|' ORDER BY series_id), '')) AS md5 FROM series",
  );
  out.series_ids = ids.rows[0]!.md5;
  return out;
}

/** A table's rows as sorted text lines, for readable comparisons. */
export async function dump(db: DbSession, table: keyof typeof DUMPS & string): Promise<string[]> {
  const r = await db.query<{ t: string }>(`SELECT t::text AS t FROM (${DUMPS[table]}) t ORDER BY 1`);
  return r.rows.map((x) => x.t);
}

export const RAW_TABLES = Object.keys(DUMPS);

/** Empties every raw table and the batch log. */
export async function emptyRawTables(db: DbSession): Promise<void> {
  await db.exec(
    'TRUNCATE items, stores, series, sales, prices, calendar_days, events, benefit_days, load_batches, rejected_rows RESTART IDENTITY',
  );
}

/** A small chain: 3 items, 2 stores, 10 days of sales (long layout), prices, calendar, events. */
export const BASE = {
  items: 'item_id,dept_id,category_id\nI1,D1,C1\nI2,D1,C1\nI3,D2,C2\n',
  stores: 'store_id,region_id\nS1,R1\nS2,R2\n',
  // 2024-03-01 is missing: the gap a corrected calendar fills.
  calendar: `day\n${days('2024-02-24', 10)
    .filter((d) => d !== '2024-03-01')
    .join('\n')}\n`,
  events:
    'day,name,kind\n2024-02-29,Leap Fair,cultural\n2024-02-29,"Pies, Cakes and More",promotion\n2024-03-02,Spring Market,cultural\n',
  benefit_days: 'region_id,day\nR1,2024-03-01\nR2,2024-03-01\nR1,2024-03-02\n',
  prices:
    'item_id,store_id,week_start,price\nI1,S1,2024-02-24,1.99\nI1,S1,2024-03-02,2.05\nI2,S2,2024-02-24,0.5\n',
  sales: salesLong(['I1', 'I2'], ['S1', 'S2'], days('2024-02-24', 10)),
};

/** `n` consecutive ISO days from `first`. */
export function days(first: string, n: number): string[] {
  const t = Date.parse(`${first}T00:00:00Z`);
  return Array.from({ length: n }, (_, i) => new Date(t + i * 86_400_000).toISOString().slice(0, 10));
}

/** Deterministic units for (item, store, day): varied, with zeros and one return (negative). */
export function units(item: string, store: string, day: string): number {
  let h = 7;
  for (const ch of item + store + day) h = (h * 31 + ch.charCodeAt(0)) % 1009;
  return h % 13 === 0 ? -1 : h % 9;
}

export function salesLong(items: string[], stores: string[], ds: string[], eol = '\n'): string {
  const lines = ['item_id,store_id,day,units'];
  for (const s of stores)
    for (const i of items) for (const d of ds) lines.push(`${i},${s},${d},${units(i, s, d)}`);
  return lines.join(eol) + eol;
}

export function salesWide(items: string[], stores: string[], ds: string[]): string {
  const lines = [['item_id', 'store_id', ...ds].join(',')];
  for (const s of stores)
    for (const i of items) lines.push([i, s, ...ds.map((d) => units(i, s, d))].join(','));
  return `${lines.join('\n')}\n`;
}
