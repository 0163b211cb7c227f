import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import type { Db } from '../../src/db/database.js';
import { type FaultsFile, readFaultsFile, type TableTotals } from '../../src/demo/faults-file.js';
import { generateChain } from '../../src/demo/generate-chain.js';
import { loadFiles } from '../../src/load/load-files.js';
import { parseConfig } from '../../src/config/config.js';
import { migrate } from '../../src/db/migrate.js';
import { openDatabase } from '../../src/db/open.js';
import { schemaFor, useTestDb } from '../helpers/db.js';
import { databaseUrl } from '../helpers/servers.js';

// The round trip: the generator counts what it wrote; the loader must store exactly that
// (duplicates rejected), and the corrections loaded with mode replace must fix what they cover.

const t = useTestDb(import.meta.url);
let dir: string;
let faults: FaultsFile;

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'larder-roundtrip-'));
  await generateChain({ dir, stores: 3, items: 30, days: 300, seed: 5 });
  faults = await readFaultsFile(join(dir, 'faults.json'));
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** Per-table totals straight from SQL, in faults.json's shape. */
async function totals(db: Db): Promise<TableTotals> {
  const one = async (sql: string) =>
    (await db.query<{ n: number; s: number }>(sql)).rows[0] ?? { n: -1, s: -1 };
  const rows = async (table: string) => (await one(`SELECT count(*)::int8 AS n FROM ${table}`)).n;
  const sales = await one('SELECT count(*)::int8 AS n, sum(units)::int8 AS s FROM sales');
  const prices = await one('SELECT count(*)::int8 AS n, sum(round(price * 100))::int8 AS s FROM prices');
  return {
    items: { rows: await rows('items') },
    stores: { rows: await rows('stores') },
    series: { rows: await rows('series') },
    sales: { rows: sales.n, units: sales.s },
    prices: { rows: prices.n, price_cents: prices.s },
    calendar_days: { rows: await rows('calendar_days') },
    events: { rows: await rows('events') },
    benefit_days: { rows: await rows('benefit_days') },
  };
}

const files = (f: Record<string, string>, from = dir) =>
  Object.fromEntries(Object.entries(f).map(([k, v]) => [k, join(from, v)]));

describe('generated chain round trip', () => {
  test('loading the generated CSVs gives the generator totals, duplicates rejected with both lines', async () => {
    const { db, config } = t();
    const res = await loadFiles(db, config, {
      files: files(faults.files),
      mode: 'append',
      maxRejects: faults.totals.rejects.sales,
    });
    expect(res.ok).toBe(true);
    const sales = res.batches.find((b) => b.target === 'sales');
    expect(sales?.rowsRead).toBe(faults.totals.files['sales.csv']?.lines);
    expect(sales?.rowsRejected).toBe(faults.totals.rejects.sales);
    expect(await totals(db)).toEqual(faults.totals.tables);

    const rejected = await db.query<{ line: number; other_line: number }>(
      'SELECT line, other_line FROM rejected_rows ORDER BY line',
    );
    const dups = faults.faults.flatMap((f) => (f.kind === 'duplicate-row' ? [f.lines] : []));
    expect(rejected.rows.map((r) => [r.other_line, r.line])).toEqual(dups);
  });

  test('loading corrections/ with mode replace fixes the partial load, prices, calendar and hierarchy', async () => {
    const { db, config } = t();
    const partial = faults.faults.find((f) => f.kind === 'partial-load');
    const gap = faults.faults.find((f) => f.kind === 'calendar-gap');
    if (!partial || !gap) throw new Error('faults.json lacks the chain faults');
    const dayUnits = async () =>
      (
        await db.query<{ n: number; u: number }>(
          'SELECT count(*)::int8 AS n, coalesce(sum(units), 0)::int8 AS u FROM sales WHERE day = $1',
          [partial.day],
        )
      ).rows[0];
    expect(await dayUnits()).toEqual({ n: partial.rows_written, u: partial.units_written });

    const res = await loadFiles(db, config, { files: files(faults.corrections), mode: 'replace' });
    expect(res.ok).toBe(true);
    expect(await dayUnits()).toEqual({ n: partial.rows_true, u: partial.units_true });
    expect(await totals(db)).toEqual(faults.totals.after_corrections);
    const cal = await db.query('SELECT 1 FROM calendar_days WHERE day = $1', [gap.day]);
    expect(cal.rowCount).toBe(1);
    for (const s of faults.faults.filter((f) => f.kind === 'price-spike')) {
      const p = await db.query<{ price: number }>(
        'SELECT price::float8 AS price FROM prices WHERE item_id = $1 AND store_id = $2 AND week_start = $3',
        [s.item_id, s.store_id, s.week_start],
      );
      expect(p.rows[0]?.price).toBe(s.true_price);
    }
    const unknown = faults.faults.flatMap((f) => (f.kind === 'unknown-item' ? [f.item_id] : []));
    const known = await db.query<{ item_id: string }>('SELECT item_id FROM items WHERE item_id = ANY($1)', [
      unknown,
    ]);
    expect(known.rows.map((r) => r.item_id).sort()).toEqual([...unknown].sort());
  });
});

describe('wide layout round trip', () => {
  test('the wide file of the same chain lands the same totals; each repeated line is one reject', async () => {
    const wideDir = join(dir, 'wide');
    await generateChain({ dir: wideDir, stores: 3, items: 30, days: 300, seed: 5, layout: 'wide' });
    const wide = await readFaultsFile(join(wideDir, 'faults.json'));
    expect(wide.totals.tables).toEqual(faults.totals.tables);
    const schema = schemaFor(import.meta.url, '-wide');
    const config = parseConfig({ database: { url: await databaseUrl(), schema } }, 'test');
    const db = await openDatabase(config, { poolSize: 1 });
    try {
      await db.exec(`DROP SCHEMA IF EXISTS "${schema}" CASCADE`);
      await migrate(db);
      const res = await loadFiles(db, config, {
        files: files(wide.files, wideDir),
        layout: 'wide',
        maxRejects: wide.totals.rejects.sales,
      });
      expect(res.ok).toBe(true);
      expect(await totals(db)).toEqual(wide.totals.tables);
      const rejected = await db.query<{ line: number; other_line: number }>(
        'SELECT line, other_line FROM rejected_rows ORDER BY line',
      );
      const dups = wide.faults.flatMap((f) => (f.kind === 'duplicate-row' ? [f.lines] : []));
      expect(rejected.rows.map((r) => [r.other_line, r.line])).toEqual(dups);
    } finally {
      await db.exec(`DROP SCHEMA IF EXISTS "${schema}" CASCADE`);
      await db.close();
    }
  });
});
