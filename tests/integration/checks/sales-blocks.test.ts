import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { CHECK_NAMES } from '../../../src/checks/registry.js';
import { type CheckRunResult, runChecks } from '../../../src/checks/run-checks.js';
import { BLOCK_DAYS, blockOf } from '../../../src/checks/sales-blocks.js';
import { type Config, parseConfig } from '../../../src/config/config.js';
import { formatDay } from '../../../src/core/days.js';
import type { Db } from '../../../src/db/database.js';
import { openDatabase } from '../../../src/db/open.js';
import { loadFiles } from '../../../src/load/load-files.js';
import { useTestDb } from '../../helpers/db.js';
import { seedChain } from '../jobs/chain-fixture.js';

// The sales pass takes the days its stored blocks hold from them and reads only the rest from
// `sales`. Whatever it read from, every check must report exactly what a pass over the whole
// table reports (the blocks are thrown away before each reference run), day after day, across a
// block boundary, after a correction of an old day, a write outside the loader and for a cutoff
// before the covered day. The chain carries faults in its history and in the appended days.
const t = useTestDb(import.meta.url);
// The seeded history ends 4 days before a block boundary; six loaded days cross it.
const BOUNDARY = 78 * BLOCK_DAYS;
const FIRST = formatDay(BOUNDARY - 300);
const SEEDED = 297;
const day = (k: number) => formatDay(BOUNDARY - 4 + k); // k = 0: the last seeded day
let dir: string;
let config: Config;
let small: Db;

beforeAll(async () => {
  const { db } = t();
  await seedChain(db, { stores: 2, items: 6, firstDay: FIRST, days: SEEDED });
  const ids = (
    await db.query<{ series_id: number }>('SELECT series_id FROM series ORDER BY series_id')
  ).rows.map((r) => r.series_id);
  // History faults: a 40-day run of zeros (a stock-out), a gap of three days, a return.
  await db.query(
    `UPDATE sales SET units = 0 WHERE series_id = $1 AND day BETWEEN $2::date - 120 AND $2::date - 81`,
    [ids[0], day(0)],
  );
  await db.query(`DELETE FROM sales WHERE series_id = $1 AND day BETWEEN $2::date - 50 AND $2::date - 48`, [
    ids[1],
    day(0),
  ]);
  await db.query(`UPDATE sales SET units = -3 WHERE series_id = $1 AND day = $2::date - 10`, [
    ids[2],
    day(0),
  ]);
  dir = mkdtempSync(join(tmpdir(), 'larder-blocks-'));
  // Every check warns (so the runs compare whole finding lists, not the first blocker).
  const checks = Object.fromEntries(CHECK_NAMES.map((c) => [c, { severity: 'warn' }]));
  config = parseConfig({ database: t().config.database, checks }, 'test');
  // A pool of two: the blocks are written after the pass instead of beside it.
  small = await openDatabase(
    parseConfig({ database: { ...t().config.database, poolSize: 2 }, checks }, 'test'),
    { migrate: false },
  );
});

afterAll(async () => {
  await small?.close();
});

/** Units per (item, store) for the day; null leaves the row out. */
type Fault = (item: string, store: string, units: number) => number | null;

/** Loads one day of every series through the loader (append or replace). */
async function loadDay(d: string, fault: Fault, mode: 'append' | 'replace' = 'append'): Promise<void> {
  const { db } = t();
  const rows = (
    await db.query<{ item_id: string; store_id: string; units: number }>(
      `SELECT item_id, store_id, (1 + abs(hashint8extended(series_id::int8 * 100003 + ($1::date - DATE '2000-01-01'), 7)) % 6)::int4 AS units
       FROM series ORDER BY series_id`,
      [d],
    )
  ).rows;
  const lines = rows
    .map((r) => [r, fault(r.item_id, r.store_id, r.units)] as const)
    .filter(([, u]) => u !== null)
    .map(([r, u]) => `${r.item_id},${r.store_id},${d},${u}`);
  const file = join(dir, `sales_${d}_${mode}.csv`);
  writeFileSync(file, `item_id,store_id,day,units\n${lines.join('\n')}\n`);
  const r = await loadFiles(db, config, { files: { sales: file }, mode });
  expect(r.ok).toBe(true);
}

/** Replaces one week of prices (the week holding `d`) through the loader; `price` maps the old price. */
async function replacePriceWeek(
  d: string,
  price: (item: string, store: string, p: number) => number,
): Promise<string> {
  const { db } = t();
  const rows = (
    await db.query<{ item_id: string; store_id: string; week_start: string; price: string }>(
      `SELECT item_id, store_id, week_start::text, price::text FROM prices
       WHERE week_start = (SELECT max(week_start) FROM prices WHERE week_start <= $1::date) ORDER BY 1, 2`,
      [d],
    )
  ).rows;
  const file = join(dir, `prices_${d}.csv`);
  const lines = rows.map(
    (r) =>
      `${r.item_id},${r.store_id},${r.week_start},${price(r.item_id, r.store_id, Number(r.price)).toFixed(2)}`,
  );
  writeFileSync(file, `item_id,store_id,week_start,price\n${lines.join('\n')}\n`);
  expect((await loadFiles(db, config, { files: { prices: file }, mode: 'replace' })).ok).toBe(true);
  return rows[0]!.week_start;
}

/** Every finding of a run, in a fixed order, without the run's own ids. */
function findingsOf(r: CheckRunResult) {
  return r.findings
    .map((f) => {
      const { runId: _r, findingId: _f, ...rest } = f as unknown as Record<string, unknown>;
      return JSON.stringify(rest);
    })
    .sort();
}

async function check(db: Db, cutoff: string): Promise<CheckRunResult> {
  return runChecks(db, config, { cutoff, today: cutoff, keepCopies: true });
}

/** The run with the blocks as they are, then a reference run after the blocks are dropped. */
async function compare(db: Db, cutoff: string) {
  const r = await check(db, cutoff);
  await t().db.exec('DELETE FROM sales_blocks_state; DELETE FROM price_history_state');
  const ref = await check(db, cutoff);
  expect(ref.salesSource?.blocksTo).toBeNull();
  expect(ref.pricesSource?.historyTo).toBeNull();
  expect(findingsOf(r)).toEqual(findingsOf(ref));
  expect(r.checks.map((c) => [c.check, c.status, c.warnings, c.infos])).toEqual(
    ref.checks.map((c) => [c.check, c.status, c.warnings, c.infos]),
  );
  return { r, ref };
}

describe('the sales pass reads stored blocks and the new days only', () => {
  test('a first pass reads everything and stores the blocks', async () => {
    const { db } = t();
    const r = await check(db, day(0));
    expect(r.salesSource).toMatchObject({ blocksTo: null, wroteFrom: 'all', rowsFromBlocks: 0 });
    expect(r.salesSource!.wroteBlocks).toBeGreaterThan(12);
    expect(r.findings.some((f) => f.code === 'stockout')).toBe(true);
    expect(r.findings.some((f) => f.code === 'series-gaps')).toBe(true);
    expect(r.findings.some((f) => f.code === 'negative-units')).toBe(true);
  });

  test('six loaded days, each checked from the blocks, equal full passes (server pool)', async () => {
    const { db } = t();
    const rows = Number((await db.query<{ n: number }>('SELECT count(*)::int AS n FROM series')).rows[0]!.n);
    for (let k = 1; k <= 6; k++) {
      // A price spike in a week the stored prices do not cover yet (the week of day 6).
      if (k === 2)
        await replacePriceWeek(day(6), (item, store, p) =>
          item === 'it003' && store === 'st02' ? p * 4 : p,
        );
      await loadDay(day(k), (item, store, u) => {
        if (item === 'it001' && store === 'st02') return 0; // a run of zeros opens
        if (item === 'it002' && store === 'st02' && k === 3) return null; // a missing row
        if (item === 'it003' && store === 'st01' && k === 4) return 400; // a spike
        if (item === 'it004' && store === 'st01' && k === 5) return -1; // a return
        return u;
      });
      const { r } = await compare(db, day(k));
      // The previous day's reference run stored blocks up to day k - 1: only day k is read.
      expect(r.salesSource).toMatchObject({ blocksTo: day(k - 1), reason: null });
      expect(r.pricesSource?.historyTo).not.toBeNull();
      expect(r.salesSource!.rowsFromSales).toBe(k === 3 ? rows - 1 : rows);
      // It rewrites the block holding day k onwards (the boundary's own block from day 4 on).
      expect(r.salesSource!.wroteFrom).toBe(formatDay(blockOf(BOUNDARY - 4 + k) * BLOCK_DAYS));
    }
  });

  test('a correction of an old day rereads from that day; the result equals a full pass', async () => {
    const { db } = t();
    await loadDay(day(7), (_i, _s, u) => u);
    await check(db, day(7)); // blocks up to day 7
    // Replace day -20 with other values (a late correction through the loader).
    await loadDay(day(-20), (item, _s, u) => (item === 'it005' ? 9 : u), 'replace');
    await loadDay(day(8), (_i, _s, u) => u);
    const { r } = await compare(db, day(8));
    expect(r.salesSource).toMatchObject({ blocksTo: day(-21), reason: `sales of ${day(-20)} changed` });
  });

  test('a correction of a stored price week rereads every price; the result equals a full pass', async () => {
    const { db } = t();
    await check(db, day(8));
    const week = await replacePriceWeek(day(-50), (item, _s, p) => (item === 'it001' ? p / 4 : p));
    const { r } = await compare(db, day(8));
    expect(r.pricesSource).toMatchObject({
      historyTo: null,
      reason: `prices of the week of ${week} changed`,
    });
    expect(r.findings.some((f) => f.check === 'price-spikes')).toBe(true);
  });

  test('a write outside the loader makes the next pass read everything', async () => {
    const { db } = t();
    await check(db, day(8));
    await db.query(`UPDATE sales SET units = units + 1 WHERE day = $1::date`, [day(-100)]);
    const { r } = await compare(db, day(8));
    expect(r.salesSource).toMatchObject({ blocksTo: null, reason: 'sales were changed outside the loader' });
  });

  test('a cutoff before the covered day reads the blocks only, cut at the cutoff', async () => {
    const { db } = t();
    await check(db, day(8));
    const r = await check(db, day(2));
    expect(r.salesSource).toMatchObject({ blocksTo: day(2), rowsFromSales: 0, wroteFrom: null });
    expect(r.pricesSource?.historyTo).not.toBeNull();
    await db.exec('DELETE FROM sales_blocks_state; DELETE FROM price_history_state');
    const ref = await check(db, day(2));
    expect(findingsOf(r)).toEqual(findingsOf(ref));
  });

  test('a run not asked to keep the copies reads valid ones but writes none', async () => {
    const { db } = t();
    await check(db, day(8));
    await loadDay(day(9), (_i, _s, u) => u);
    const r = await runChecks(db, config, { cutoff: day(9), today: day(9) });
    expect(r.salesSource).toMatchObject({ blocksTo: day(8), wroteFrom: null, wroteBlocks: 0 });
    expect(r.pricesSource).toMatchObject({ stored: false });
    expect(r.pricesSource?.historyTo).not.toBeNull();
    const state = await db.query<{ d: string }>('SELECT covered_to::text AS d FROM sales_blocks_state');
    expect(state.rows[0]!.d).toBe(day(8));
  });

  test('with a pool of two the blocks are written after the pass, with the same findings', async () => {
    await loadDay(day(10), (item, store, u) => (item === 'it006' && store === 'st01' ? 0 : u));
    await check(t().db, day(9));
    const { r } = await compare(small, day(10));
    expect(r.salesSource).toMatchObject({ blocksTo: day(9), reason: null });
    const again = await check(small, day(10));
    expect(again.salesSource).toMatchObject({ blocksTo: day(10), rowsFromSales: 0 });
    expect(findingsOf(again)).toEqual(findingsOf(r));
  });
});
