import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, expect, test } from 'vitest';
import { stageChainGroups } from '../../../src/build/chain-groups.js';
import {
  readStoreFirstDays,
  readStorePricesFromCopy,
  readStoreSalesFromBlocks,
} from '../../../src/build/copy-input.js';
import {
  type PartitionSeries,
  readDepartments,
  readPartitionPrices,
  readPartitionSales,
  readPartitionSeries,
  type StorePrices,
} from '../../../src/build/partition-input.js';
import { CHECK_NAMES } from '../../../src/checks/registry.js';
import { runChecks } from '../../../src/checks/run-checks.js';
import { forgetRecentSales } from '../../../src/checks/recent-sales.js';
import { BLOCK_DAYS } from '../../../src/checks/sales-blocks.js';
import { type Config, parseConfig } from '../../../src/config/config.js';
import { formatDay, parseDay } from '../../../src/core/days.js';
import type { DbSession } from '../../../src/db/database.js';
import { loadFiles } from '../../../src/load/load-files.js';
import { useTestDb } from '../../helpers/db.js';
import { seedChain } from '../jobs/chain-fixture.js';

// A refresh partition reads sales and prices from the checks' copies when they are current.
// What it reads must be exactly what the table readers give (the same dense units, the same
// price maps in the same order), with the days and weeks past the copies from the tables, and
// the copies must be refused once a change they do not hold is logged.
const t = useTestDb(import.meta.url);
// The history ends a few days before a block boundary, so one more loaded day stays inside it
// and the copy's blocks span two blocks for every series.
const BOUNDARY = 78 * BLOCK_DAYS;
const FIRST = formatDay(BOUNDARY - 300);
const LAST = formatDay(BOUNDARY - 5);
let config: Config;
let stores: string[];

beforeAll(async () => {
  const { db } = t();
  await seedChain(db, { stores: 2, items: 5, firstDay: FIRST, days: 296 });
  const ids = (await db.query<{ id: number }>('SELECT series_id AS id FROM series ORDER BY 1')).rows.map(
    (r) => r.id,
  );
  // A gap of three days, and a price row whose week starts on the wrong weekday (both faults the
  // checks report; the readers must carry them as they are).
  await db.query(`DELETE FROM sales WHERE series_id = $1 AND day BETWEEN $2::date - 50 AND $2::date - 48`, [
    ids[1],
    LAST,
  ]);
  // A series first sold inside a block (not at its start), and one first sold on the day the
  // first test loads, after the copies: both first days must come out as a probe of sales finds them.
  await db.query(`DELETE FROM sales WHERE series_id = $1 AND day < $2::date - 77`, [ids[3], LAST]);
  await db.query(`DELETE FROM sales WHERE series_id = $1`, [ids[4]]);
  await db.query(
    `INSERT INTO prices (item_id, store_id, week_start, price)
     SELECT item_id, store_id, $2::date - 30 + 2, 9.99 FROM series WHERE series_id = $1`,
    [ids[2], LAST],
  );
  const checks = Object.fromEntries(CHECK_NAMES.map((c) => [c, { severity: 'warn' }]));
  config = parseConfig({ database: t().config.database, checks }, 'test');
  // The runner's check step: it stores both copies and keeps the newest days in this process.
  const r = await runChecks(db, config, { cutoff: LAST, today: LAST, keepCopies: true, keepRecent: true });
  expect(r.pricesSource?.stored).toBe(true);
  stores = (await db.query<{ s: string }>('SELECT DISTINCT store_id AS s FROM series ORDER BY 1')).rows.map(
    (r) => r.s,
  );
});

const dense = (series: readonly PartitionSeries[]) => series.map((x) => [x.seriesId, Array.from(x.units)]);
const plain = (p: StorePrices) => ({
  prices: [...p.prices].map(([item, v]) => [item, Array.from(v.weeks), Array.from(v.prices)]),
  dept: [...p.deptPrices].map(([d, byWeek]) => [d, [...byWeek].map(([w, c]) => [w, [...c]])]),
});

async function salesBoth(s: DbSession, store: string, base: number, cutoff: number) {
  const a = await readPartitionSeries(s, store, cutoff);
  const firstDays = await readStoreFirstDays(s, store, cutoff);
  const b = await readPartitionSeries(s, store, cutoff, firstDays ?? undefined);
  const spans = (xs: readonly PartitionSeries[]) => xs.map((x) => [x.seriesId, formatDay(x.firstDay)]);
  await readPartitionSales(s, store, a, base, cutoff);
  const rows = await readStoreSalesFromBlocks(s, store, b, base, cutoff);
  return {
    table: dense(a),
    copy: rows === null ? null : dense(b),
    firstTable: spans(a),
    firstCopy: firstDays === null ? null : spans(b),
  };
}

async function pricesBoth(s: DbSession, store: string, boundary: number) {
  const dept = await readDepartments(s);
  const copy = await readStorePricesFromCopy(s, store, boundary, dept);
  return { table: plain(await readPartitionPrices(s, store, boundary, dept)), copy: copy && plain(copy) };
}

test('the copies give what the tables give, days and weeks past them included', async () => {
  const { db } = t();
  const dir = mkdtempSync(join(tmpdir(), 'larder-copy-input-'));
  // One more day through the loader: the blocks cover up to LAST, the new day comes from sales.
  const next = formatDay(parseDay(LAST)! + 1);
  const rows = (
    await db.query<{ item_id: string; store_id: string }>(
      'SELECT item_id, store_id FROM series ORDER BY 1, 2',
    )
  ).rows;
  const file = join(dir, 'sales.csv');
  writeFileSync(
    file,
    `item_id,store_id,day,units\n${rows.map((r, i) => `${r.item_id},${r.store_id},${next},${i % 4}`).join('\n')}\n`,
  );
  expect((await loadFiles(db, config, { files: { sales: file }, mode: 'append' })).ok).toBe(true);
  // Twice: from the days the check pass kept in this process, and (those forgotten) from the
  // blocks; the first way sends no read of the blocks at all.
  for (const from of ['memory', 'blocks'] as const) {
    if (from === 'blocks') forgetRecentSales();
    let blockReads = 0;
    await db.session(async (inner) => {
      const s: DbSession = new Proxy(inner, {
        get(target, prop, receiver) {
          if (prop === 'copyTo')
            return (sql: string) => {
              if (sql.includes('sales_blocks b')) blockReads++;
              return target.copyTo(sql);
            };
          const v = Reflect.get(target, prop, receiver);
          return typeof v === 'function' ? v.bind(target) : v;
        },
      });
      await compareCopies(s);
    });
    if (from === 'memory') expect(blockReads).toBe(0);
    else expect(blockReads).toBeGreaterThan(0);
  }
});

async function compareCopies(s: DbSession): Promise<void> {
  const next = formatDay(parseDay(LAST)! + 1);
  for (const store of stores) {
    for (const [base, cutoff] of [
      [parseDay(FIRST)! - 3, parseDay(LAST)!],
      [parseDay(LAST)! - 120, parseDay(next)!],
      [BOUNDARY - BLOCK_DAYS + 7, parseDay(LAST)! - 10],
    ] as const) {
      const r = await salesBoth(s, store, base, cutoff);
      expect(r.copy, `${store} ${formatDay(base)}..${formatDay(cutoff)}`).not.toBeNull();
      expect(r.copy).toEqual(r.table);
      expect(r.firstCopy).toEqual(r.firstTable);
    }
    // Boundaries before, at and after the copy's newest week (the later weeks from prices).
    for (const boundary of [parseDay(LAST)! - 40, parseDay(LAST)!, parseDay(LAST)! + 30]) {
      const r = await pricesBoth(s, store, boundary);
      expect(r.copy, `${store} prices to ${formatDay(boundary)}`).not.toBeNull();
      expect(r.copy).toEqual(r.table);
      expect(r.table.prices.length).toBe(5);
    }
  }
}

test('chain-wide group totals staged from the blocks equal PostgreSQL summing the sales rows', async () => {
  const { db } = t();
  const from = parseDay(LAST)! - 200;
  const cutoff = parseDay(LAST)! + 1; // the loaded day lies past the blocks
  await stageChainGroups(db, 'copy_input_groups', ['item', 'total'], from, cutoff, 2);
  // Decoded: per group and day offset, the total and the member count (big-endian records).
  const staged = (
    await db.query<{ level: string; k1: string; days: Buffer }>(
      'SELECT level, k1, days FROM copy_input_groups ORDER BY level, k1',
    )
  ).rows.flatMap((r) => {
    const out: string[] = [];
    for (let p = 0; p < r.days.length; p += 16)
      out.push(
        `${r.level}|${r.k1}|${formatDay(from + r.days.readInt32BE(p))}|${r.days.readDoubleBE(p + 4)}|${r.days.readInt32BE(p + 12)}`,
      );
    return out;
  });
  // The reference: GROUP BY in PostgreSQL over the raw rows.
  const ref = (
    await db.query<{ line: string }>(
      `SELECT line FROM (
         SELECT 'item' AS level, r.item_id AS k1, s.day, sum(s.units)::float8 AS total, count(*) AS n
         FROM sales s JOIN series r USING (series_id) WHERE s.day BETWEEN $1::date AND $2::date GROUP BY r.item_id, s.day
         UNION ALL
         SELECT 'total', '', s.day, sum(s.units)::float8, count(*) FROM sales s WHERE s.day BETWEEN $1::date AND $2::date GROUP BY s.day
       ) x, LATERAL (SELECT level || '|' || k1 || '|' || day::text || '|' || total::text || '|' || n::text AS line) l
       ORDER BY level, k1, day`,
      [formatDay(from), formatDay(cutoff)],
    )
  ).rows.map((r) => r.line);
  expect(staged.length).toBeGreaterThan(1000);
  expect(staged).toEqual(ref);
  await db.exec('DROP TABLE copy_input_groups');
});

test('a change the copies do not hold, or no copy at all, makes the readers decline', async () => {
  const { db } = t();
  await db.session(async (s) => {
    const store = stores[0]!;
    // A write outside the loader: the change log knows a statement touched the table, not where.
    await s.query(`UPDATE prices SET price = price + 1 WHERE week_start = $1::date - 60`, [LAST]);
    expect((await pricesBoth(s, store, parseDay(LAST)!)).copy).toBeNull();
    await s.query(`UPDATE sales SET units = units + 1 WHERE day = $1::date - 60`, [LAST]);
    expect((await salesBoth(s, store, parseDay(LAST)! - 90, parseDay(LAST)!)).copy).toBeNull();
    expect((await salesBoth(s, store, parseDay(LAST)! - 90, parseDay(LAST)!)).firstCopy).toBeNull();
    // After a crash PostgreSQL empties the unlogged copies and their states together.
    await runChecks(db, config, { cutoff: LAST, today: LAST, keepCopies: true });
    expect((await salesBoth(s, store, parseDay(LAST)! - 90, parseDay(LAST)!)).copy).not.toBeNull();
    await s.exec('TRUNCATE sales_blocks, sales_blocks_state, price_history, price_history_state');
    expect((await salesBoth(s, store, parseDay(LAST)! - 90, parseDay(LAST)!)).copy).toBeNull();
    expect((await salesBoth(s, store, parseDay(LAST)! - 90, parseDay(LAST)!)).firstCopy).toBeNull();
    expect((await pricesBoth(s, store, parseDay(LAST)!)).copy).toBeNull();
  });
});
