import { gzipSync } from 'node:zlib';
import { DuckDBInstance } from '@duckdb/node-api';
import { beforeEach, describe, expect, test } from 'vitest';
import { loadFiles, RECORDED_REJECTS } from '../../src/load/load-files.js';
import { useTestDb } from '../helpers/db.js';
import {
  BASE,
  checksums,
  days,
  dump,
  emptyRawTables,
  salesLong,
  salesWide,
  units,
  useTempDir,
} from './load-helpers.js';

const t = useTestDb(import.meta.url);
const file = useTempDir('larder-load-');

const baseFiles = () =>
  Object.fromEntries(Object.entries(BASE).map(([k, v]) => [k, file(`base-${k}.csv`, v)])) as Record<
    keyof typeof BASE,
    string
  >;

beforeEach(async () => {
  await emptyRawTables(t().db);
});

describe('a small chain', () => {
  test('loads in dependency order; counts and sums agree with DuckDB reading the same files', async () => {
    const { db, config } = t();
    const files = baseFiles();
    const res = await loadFiles(db, config, { files });
    expect(res.ok).toBe(true);
    expect(res.batches.map((b) => b.target)).toEqual([
      'items',
      'stores',
      'calendar',
      'events',
      'benefit_days',
      'prices',
      'sales',
    ]);
    // DuckDB (@duckdb/node-api) parses the CSVs independently of csv-parse.
    const duck = await (await DuckDBInstance.create(':memory:')).connect();
    const ref = async (q: string) =>
      (await duck.runAndReadAll(q)).getRowObjectsJS()[0] as Record<string, unknown>;
    const s = await ref(
      `SELECT count(*)::INT AS n, sum(units)::INT AS u, count(DISTINCT (item_id, store_id))::INT AS series,
              min(day)::VARCHAR AS first, max(day)::VARCHAR AS last FROM read_csv('${files.sales}', header = true)`,
    );
    const p = await ref(
      `SELECT count(*)::INT AS n, sum(price)::DOUBLE AS s FROM read_csv('${files.prices}', header = true)`,
    );
    const e = await ref(`SELECT count(*)::INT AS n FROM read_csv('${files.events}', header = true)`);
    const ours = async (q: string) => (await db.query<Record<string, unknown>>(q)).rows[0]!;
    expect(await ours('SELECT count(*)::int AS n, sum(units)::int AS u FROM sales')).toEqual({
      n: s.n,
      u: s.u,
    });
    expect((await ours('SELECT count(*)::int AS n FROM series')).n).toBe(s.series);
    expect(await ours('SELECT count(*)::int AS n, sum(price)::float8 AS s FROM prices')).toEqual({
      n: p.n,
      s: p.s,
    });
    expect((await ours('SELECT count(*)::int AS n FROM events')).n).toBe(e.n);
    const batch = await ours(
      "SELECT first_day, last_day, rows_stored::int AS n FROM load_batches WHERE target = 'sales'",
    );
    expect(batch).toEqual({ first_day: s.first, last_day: s.last, n: s.n });
    // Quoted commas survive: "Pies, Cakes and More" is one event name.
    expect(await dump(db, 'events')).toContain('(2024-02-29,"Pies, Cakes and More",promotion)');
  });

  test('wide and long layouts of the same data load to identical tables; an empty wide cell is no row', async () => {
    const { db, config } = t();
    const items = ['I1', 'I2', 'I3'];
    const stores = ['S1', 'S2'];
    const ds = days('2023-12-28', 40);
    await loadFiles(db, config, { files: { sales: file('long.csv', salesLong(items, stores, ds)) } });
    const long = await dump(db, 'sales');
    expect(long).toHaveLength(items.length * stores.length * ds.length);
    await emptyRawTables(db);
    const wide = await loadFiles(db, config, {
      files: { sales: file('wide.csv', salesWide(items, stores, ds)) },
    });
    expect(wide.batches[0]).toMatchObject({ status: 'loaded', rowsRead: 6, rowsStored: 240 });
    expect(await dump(db, 'sales')).toEqual(long);

    await emptyRawTables(db);
    const gaps = 'item_id,store_id,2024-01-01,2024-01-02,2024-01-03\nI1,S1,4,,2\nI2,S1,,,\n';
    const res = await loadFiles(db, config, { files: { sales: file('gaps.csv', gaps) }, layout: 'wide' });
    expect(res.batches[0]!.rowsStored).toBe(2);
    expect(await dump(db, 'sales')).toEqual(['(I1,S1,2024-01-01,4)', '(I1,S1,2024-01-03,2)']);
  });

  test('the same file parsed in a worker thread and inline, with tiny chunks and many COPYs, gives the same tables', async () => {
    const { db, config } = t();
    const text = salesLong(['I1', 'I2', 'I3'], ['S1', 'S2', 'S3'], days('2024-01-01', 60), '\r\n');
    const plain = file('both.csv', text);
    const gz = file('both.csv.gz', gzipSync(text));
    const runs = [
      { f: plain, o: { parseInWorker: false } },
      { f: plain, o: { parseInWorker: true, segmentBytes: 4096 } },
      { f: gz, o: { parseInWorker: true, chunkSize: 333 } },
      { f: gz, o: { parseInWorker: false, chunkSize: 97, segmentBytes: 1000 } },
    ];
    const dumps: string[][] = [];
    for (const { f, o } of runs) {
      await emptyRawTables(db);
      const res = await loadFiles(db, config, { files: { sales: f } }, o);
      expect(res.batches[0]).toMatchObject({ status: 'loaded', rowsStored: 540 });
      dumps.push(await dump(db, 'sales'));
    }
    for (const d of dumps) expect(d).toEqual(dumps[0]);
  });
});

test('a hard error deep in a file, after rows reached the COPY, stores nothing (inline and in a worker)', async () => {
  const { db, config } = t();
  await loadFiles(db, config, { files: baseFiles() });
  const before = await checksums(db);
  const good = salesLong(['I1', 'I2'], ['S7', 'S8'], days('2020-01-01', 3000));
  const path = file('deep.csv', Buffer.concat([Buffer.from(good), Buffer.from([0xc0, 0x80, 0x0a])]));
  const lines = good.split('\n').length;
  for (const parseInWorker of [false, true]) {
    const err = await loadFiles(
      db,
      config,
      { files: { sales: path } },
      { parseInWorker, chunkSize: 4096 },
    ).catch((e: unknown) => e);
    expect((err as Error).message).toBe(`${path}: line ${lines}: invalid UTF-8 (byte offset ${good.length})`);
    expect(await checksums(db)).toEqual(before);
  }
});

describe('replace and append', () => {
  test('replace: a corrected week replaces exactly those keys and days, never touching others', async () => {
    const { db, config } = t();
    await loadFiles(db, config, { files: baseFiles() });
    const before = await dump(db, 'sales');
    // One item in one store, 7 of its 10 days, plus a day it never had (a new key).
    const week = days('2024-02-27', 7);
    const corrected = [
      'item_id,store_id,day,units',
      ...week.map((d) => `I1,S2,${d},${units('I1', 'S2', d) + 100}`),
    ];
    corrected.push('I1,S2,2024-03-20,7');
    const res = await loadFiles(db, config, {
      files: { sales: file('week.csv', `${corrected.join('\n')}\n`) },
      mode: 'replace',
    });
    expect(res.batches[0]).toMatchObject({ status: 'loaded', rowsStored: 8, rowsRejected: 0 });
    const after = await dump(db, 'sales');
    const covered = new Set([...week, '2024-03-20'].map((d) => `I1,S2,${d}`));
    const key = (row: string) => row.slice(1).split(',').slice(0, 3).join(',');
    expect(after.filter((r) => !covered.has(key(r)))).toEqual(before.filter((r) => !covered.has(key(r))));
    expect(after.filter((r) => covered.has(key(r))).sort()).toEqual(
      [...week.map((d) => `(I1,S2,${d},${units('I1', 'S2', d) + 100})`), '(I1,S2,2024-03-20,7)'].sort(),
    );
  });

  test('replace: corrected prices, a missing calendar day, corrected hierarchy rows, a day of events', async () => {
    const { db, config } = t();
    await loadFiles(db, config, { files: baseFiles() });
    const res = await loadFiles(db, config, {
      mode: 'replace',
      files: {
        items: file('items-fix.csv', 'item_id,dept_id,category_id\nI3,D9,C9\nI4,D1,C1\n'),
        calendar: file('cal-fix.csv', 'day\n2024-03-01\n'),
        events: file('events-fix.csv', 'day,name,kind\n2024-02-29,Leap Fair,sporting\n'),
        prices: file('prices-fix.csv', 'item_id;store_id;week_start;price\nI1;S1;2024-03-02;1.9500\n'),
      },
    });
    expect(res.ok).toBe(true);
    expect(await dump(db, 'items')).toEqual(['(I1,D1,C1)', '(I2,D1,C1)', '(I3,D9,C9)', '(I4,D1,C1)']);
    expect(await dump(db, 'prices')).toEqual([
      '(I1,S1,2024-02-24,1.9900)',
      '(I1,S1,2024-03-02,1.9500)',
      '(I2,S2,2024-02-24,0.5000)',
    ]);
    expect(await dump(db, 'calendar_days')).toEqual(days('2024-02-24', 10).map((d) => `(${d})`));
    // Events are replaced by day: the day's events are exactly the file's.
    expect(await dump(db, 'events')).toEqual([
      '(2024-02-29,"Leap Fair",sporting)',
      '(2024-03-02,"Spring Market",cultural)',
    ]);
  });

  test('append rejects keys already stored, names them, and changes nothing', async () => {
    const { db, config } = t();
    await loadFiles(db, config, { files: baseFiles() });
    const before = await checksums(db);
    const again = 'item_id,store_id,day,units\nI3,S1,2024-02-24,1\nI1,S1,2024-02-25,5\n';
    const res = await loadFiles(db, config, { files: { sales: file('again.csv', again) } });
    expect(res.ok).toBe(false);
    expect(res.batches[0]).toMatchObject({ status: 'rejected', rowsRead: 2, rowsStored: 0, rowsRejected: 1 });
    expect(res.batches[0]!.firstRejects).toEqual([
      { line: 3, reason: 'key already stored: ["I1","S1","2024-02-25"]' },
    ]);
    expect(await checksums(db)).toEqual(before);
    const rej = await db.query('SELECT line, raw, key FROM rejected_rows WHERE batch_id = $1', [
      res.batches[0]!.batchId,
    ]);
    expect(rej.rows).toEqual([{ line: 3, raw: 'I1,S1,2024-02-25,5', key: '["I1","S1","2024-02-25"]' }]);
  });

  test('with max rejects, valid rows land and every reject is recorded; new series get fresh ids', async () => {
    const { db, config } = t();
    await loadFiles(db, config, { files: baseFiles() });
    const text = [
      'item_id,store_id,day,units',
      'I1,S1,2024-03-10,3', // new day of a stored series
      'I9,S1,2024-03-10,2', // unknown item: stored, the checks flag it
      'I1,S1,2024-03-10,4', // duplicate of line 2
      'I1,S1,2024-02-24,9', // already stored
      'I2,S1,2024-03-11,1.25',
    ].join('\n');
    const res = await loadFiles(db, config, { files: { sales: file('mixed.csv', text) }, maxRejects: 3 });
    expect(res.batches[0]).toMatchObject({ status: 'loaded', rowsRead: 5, rowsStored: 2, rowsRejected: 3 });
    expect(res.batches[0]!.firstRejects).toEqual([
      { line: 4, reason: 'duplicate key ["I1","S1","2024-03-10"]: also on line 2', otherLine: 2 },
      { line: 5, reason: 'key already stored: ["I1","S1","2024-02-24"]' },
      { line: 6, reason: 'units "1.25" is not an integer (fractional units cannot be stored)' },
    ]);
    const s = await db.query<{ series_id: number }>("SELECT series_id FROM series WHERE item_id = 'I9'");
    expect(s.rows).toEqual([{ series_id: 5 }]);
    // The identity sequence moved past the explicit ids: a default insert does not collide.
    const next = await db.query<{ series_id: number }>(
      "INSERT INTO series (item_id, store_id) VALUES ('Z', 'Z') RETURNING series_id",
    );
    expect(next.rows[0]!.series_id).toBe(6);
  });

  test('in-file duplicates in keys with a day name both lines (found by a second pass)', async () => {
    const { db, config } = t();
    const prices =
      'item_id,store_id,week_start,price\nI1,S1,2024-02-24,1\nI2,S1,2024-02-24,1\nI1,S1,2024-02-24,2\n';
    const cal = 'day\n2024-01-01\n2024-01-02\n2024-01-01\n2024-01-01\n';
    const res = await loadFiles(db, config, {
      files: { prices: file('dup-prices.csv', prices), calendar: file('dup-cal.csv', cal) },
    });
    expect(res.batches.map((b) => b.firstRejects)).toEqual([
      [
        { line: 4, reason: 'duplicate key ["2024-01-01"]: also on line 2', otherLine: 2 },
        { line: 5, reason: 'duplicate key ["2024-01-01"]: also on line 2', otherLine: 2 },
      ],
      [{ line: 4, reason: 'duplicate key ["I1","S1","2024-02-24"]: also on line 2', otherLine: 2 }],
    ]);
  });

  test('more rejects than rejected_rows keeps: all are counted, the first ones recorded', async () => {
    const { db, config } = t();
    const lines = ['item_id,store_id,day,units'];
    for (let i = 0; i < RECORDED_REJECTS + 5; i++) lines.push(`I1,S1,2024-01-01,x${i}`);
    const res = await loadFiles(db, config, { files: { sales: file('many.csv', lines.join('\n')) } });
    expect(res.batches[0]).toMatchObject({ status: 'rejected', rowsRejected: RECORDED_REJECTS + 5 });
    expect(res.batches[0]!.firstRejects).toHaveLength(10);
    const n = await db.query<{ n: number; first: number }>(
      'SELECT count(*)::int AS n, min(line)::int AS first FROM rejected_rows WHERE batch_id = $1',
      [res.batches[0]!.batchId],
    );
    expect(n.rows[0]).toEqual({ n: RECORDED_REJECTS, first: 2 });
  });
});

// Gregorian leap-year rule (ISO 8601): 2024 and 2000 are leap years; 2023 and 1900 are not.
test('leap days: 2024-02-29 and 2000-02-29 are stored; 2023-02-29 and 1900-02-29 are rejected rows', async () => {
  const { db, config } = t();
  const text =
    'item_id,store_id,day,units\nI1,S1,2024-02-29,1\nI1,S1,2000-02-29,2\nI1,S1,2023-02-29,3\nI1,S1,1900-02-29,4\n';
  const cal = 'day\n2024-02-29\n2000-02-29\n2023-02-29\n1900-02-29\n';
  const res = await loadFiles(db, config, {
    files: { sales: file('leap.csv', text), calendar: file('leap-cal.csv', cal) },
    maxRejects: 2,
  });
  for (const b of res.batches) {
    expect(b).toMatchObject({ status: 'loaded', rowsStored: 2, rowsRejected: 2 });
    expect(b.firstRejects.map((r) => r.line)).toEqual([4, 5]);
    expect(b.firstRejects[0]!.reason).toBe('day "2023-02-29" is not a valid ISO 8601 day (YYYY-MM-DD)');
  }
  expect(await dump(db, 'sales')).toEqual(['(I1,S1,2000-02-29,2)', '(I1,S1,2024-02-29,1)']);
  expect(await dump(db, 'calendar_days')).toEqual(['(2000-02-29)', '(2024-02-29)']);
});
