import { createHash } from 'node:crypto';
import { existsSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type DuckDBConnection, DuckDBInstance } from '@duckdb/node-api';
import { tableFromIPC } from 'apache-arrow';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { exportSnapshot } from '../../src/export/export-snapshot.js';
import { openSnapshot } from '../../src/export/open-snapshot.js';
import { useTestDb } from '../helpers/db.js';
import { makeSnapshot } from './export-fixtures.js';

const t = useTestDb(import.meta.url);
const dir = mkdtempSync(join(tmpdir(), 'larder-export-'));
let duck: DuckDBConnection;

// 41 series x 1,700 days = 69,700 rows: more than one 65,536-row batch.
const SPEC = { set: 'daily', cutoff: '2024-01-31', table: 'snap_daily', series: 41, days: 1672, horizon: 28 };

beforeAll(async () => {
  await makeSnapshot(t().db, SPEC);
  duck = await (await DuckDBInstance.create(':memory:')).connect();
});
afterAll(() => duck?.closeSync());

const sha = (p: string) => createHash('sha256').update(readFileSync(p)).digest('hex');

/** The snapshot as PostgreSQL holds it, in export order, values as DuckDB prints them. */
let cached: unknown[][] | undefined;
async function expected(): Promise<unknown[][]> {
  if (cached) return cached;
  const r = await t().db.query<Record<string, unknown>>(
    `SELECT s.item_id, s.store_id, x.day::text AS day, x.is_predict, x.label, x.lag_7, x.mean_28, x.price_ratio
     FROM snap_daily x JOIN series s USING (series_id) ORDER BY x.series_id, x.day`,
  );
  cached = r.rows.map((row) => Object.values(row));
  return cached;
}

async function duckRows(from: string): Promise<{ rows: unknown[][]; types: string[] }> {
  const d = await duck.runAndReadAll(`DESCRIBE SELECT * FROM ${from}`);
  const types = d.getRowObjects().map((r) => `${r.column_name} ${r.column_type}`);
  const r = await duck.runAndReadAll(
    `SELECT item_id, store_id, strftime(day, '%Y-%m-%d'), is_predict, label, lag_7, mean_28, price_ratio FROM ${from}`,
  );
  return { rows: r.getRows().map((row) => row.map((v) => (typeof v === 'bigint' ? Number(v) : v))), types };
}

// DuckDB (@duckdb/node-api) reads the files back: an implementation independent of the writer.
const DUCK_TYPES = [
  'item_id VARCHAR',
  'store_id VARCHAR',
  'day DATE',
  'is_predict BOOLEAN',
  'label INTEGER',
  'lag_7 DOUBLE',
  'mean_28 DOUBLE',
  'price_ratio DOUBLE',
];

function sameValues(got: unknown[][], want: unknown[][]): void {
  expect(got.length).toBe(want.length);
  for (let i = 0; i < want.length; i++) {
    const g = got[i]!;
    const w = want[i]!;
    for (let c = 0; c < w.length; c++) {
      if (typeof w[c] === 'number' && Number.isNaN(w[c]))
        expect(Number.isNaN(g[c] as number), `row ${i} col ${c}`).toBe(true);
      else if (g[c] !== w[c]) expect(g[c], `row ${i} col ${c}`).toBe(w[c]);
    }
  }
}

describe('Parquet', () => {
  test('round trip through DuckDB read_parquet: same rows, values and column types', async () => {
    const { db, config } = t();
    const out = join(dir, 'daily.parquet');
    const r = await exportSnapshot(db, config, { set: 'daily', cutoff: '2024-01-31', out });
    expect(r.rowCount).toBe(41 * 1700);
    const got = await duckRows(`read_parquet('${out}')`);
    expect(got.types).toEqual(DUCK_TYPES);
    sameValues(got.rows, await expected());
    const groups = await duck.runAndReadAll(
      `SELECT count(DISTINCT row_group_id)::int AS g FROM parquet_metadata('${out}')`,
    );
    expect(groups.getRowObjects()[0]!.g).toBeGreaterThan(0);
  });

  test('dictionaries only on columns with few distinct values', async () => {
    const { db, config } = t();
    const out = join(dir, 'daily-dict.parquet');
    await exportSnapshot(db, config, { set: 'daily', cutoff: '2024-01-31', out });
    // DuckDB's parquet_metadata lists each column chunk's encodings as the file records them
    // (Parquet format: RLE_DICTIONARY / PLAIN_DICTIONARY mark dictionary-encoded pages).
    const r = await duck.runAndReadAll(
      `SELECT path_in_schema AS col, string_agg(DISTINCT encodings, ',') AS enc
       FROM parquet_metadata('${out}') GROUP BY 1`,
    );
    const enc = new Map(r.getRowObjects().map((o) => [String(o.col), String(o.enc)]));
    const dict = (c: string) => /DICTIONARY/.test(enc.get(c) ?? '');
    // The first batch is 65,536 rows: lag_7 has more distinct values than half of them, price_ratio
    // and the ids far fewer (counted in PostgreSQL below, not assumed).
    const counts = (
      await db.query<{ lag: number; ratio: number }>(
        `SELECT count(DISTINCT lag_7)::int AS lag, count(DISTINCT price_ratio)::int AS ratio
         FROM (SELECT lag_7, price_ratio FROM snap_daily ORDER BY series_id, day LIMIT 65536) f`,
      )
    ).rows[0]!;
    expect(counts.lag).toBeGreaterThan(32768);
    expect(counts.ratio).toBeLessThan(32768);
    expect(dict('lag_7')).toBe(false);
    expect(dict('price_ratio')).toBe(true);
    expect(dict('store_id')).toBe(true);
    expect(dict('item_id')).toBe(true);
  });

  test('further exports are byte-identical and the manifest describes the file', async () => {
    const { db, config } = t();
    const a = await exportSnapshot(db, config, {
      set: 'daily',
      cutoff: '2024-01-31',
      out: join(dir, 'a.parquet'),
    });
    for (const again of ['b', 'c']) {
      const b = await exportSnapshot(db, config, {
        set: 'daily',
        cutoff: '2024-01-31',
        out: join(dir, `${again}.parquet`),
      });
      expect(readFileSync(a.path).equals(readFileSync(b.path))).toBe(true);
    }
    const m = JSON.parse(readFileSync(a.manifestPath, 'utf8'));
    expect(m.sha256).toBe(sha(a.path)); // node:crypto over the bytes on disk
    expect(a.sha256).toBe(m.sha256);
    expect(m).toMatchObject({
      set: 'daily',
      cutoff: '2024-01-31',
      definitionHash: 'def-daily',
      dataFingerprint: 'data-snap_daily',
      rowCount: 69_700,
      format: 'parquet',
      file: 'a.parquet',
    });
    expect(m.columns.map((c: { name: string; type: string }) => `${c.name}:${c.type}`)).toEqual([
      'item_id:text',
      'store_id:text',
      'day:date',
      'is_predict:bool',
      'label:int4',
      'lag_7:float8',
      'mean_28:float8',
      'price_ratio:float8',
    ]);
    for (const c of m.columns) expect(c.description.length).toBeGreaterThan(3);
    expect(JSON.stringify(m)).not.toMatch(/exported_?at/i);
  });

  test('rows, days and columns can be selected', async () => {
    const { db, config } = t();
    const out = join(dir, 'sel.parquet');
    const r = await exportSnapshot(db, config, {
      set: 'daily',
      cutoff: '2024-01-31',
      out,
      rows: 'train',
      from: '2024-01-01',
      to: '2024-02-15',
      columns: ['price_ratio', 'lag_7'],
    });
    expect(r.rowCount).toBe(41 * 31);
    const d = await duck.runAndReadAll(`SELECT * FROM read_parquet('${out}') LIMIT 1`);
    expect(d.columnNames()).toEqual([
      'item_id',
      'store_id',
      'day',
      'is_predict',
      'label',
      'price_ratio',
      'lag_7',
    ]);
    const p = await exportSnapshot(db, config, { set: 'daily', cutoff: '2024-01-31', out, rows: 'predict' });
    expect(p.rowCount).toBe(41 * 28);
  });

  test('an empty selection is a valid file with the schema and no rows', async () => {
    const { db, config } = t();
    for (const format of ['parquet', 'csv', 'arrow'] as const) {
      const out = join(dir, `empty.${format}`);
      const r = await exportSnapshot(db, config, {
        set: 'daily',
        cutoff: '2024-01-31',
        out,
        format,
        from: '2030-01-01',
      });
      expect(r.rowCount).toBe(0);
      if (format === 'parquet') {
        const got = await duckRows(`read_parquet('${out}')`);
        expect(got).toEqual({ rows: [], types: DUCK_TYPES });
      } else if (format === 'arrow') {
        expect(tableFromIPC(readFileSync(out)).numRows).toBe(0);
      } else {
        expect(readFileSync(out, 'utf8')).toBe(
          'item_id,store_id,day,is_predict,label,lag_7,mean_28,price_ratio\n',
        );
      }
    }
  });
});

describe('CSV and Arrow', () => {
  test('CSV round trip through DuckDB read_csv', async () => {
    const { db, config } = t();
    const out = join(dir, 'daily.csv');
    await exportSnapshot(db, config, { set: 'daily', cutoff: '2024-01-31', out, format: 'csv' });
    const types = `{'item_id': 'VARCHAR', 'store_id': 'VARCHAR', 'day': 'DATE', 'is_predict': 'BOOLEAN', 'label': 'INTEGER',
      'lag_7': 'DOUBLE', 'mean_28': 'DOUBLE', 'price_ratio': 'DOUBLE'}`;
    const got = await duckRows(`read_csv('${out}', header = true, columns = ${types})`);
    sameValues(got.rows, await expected());
  });

  test('Arrow IPC round trip through the apache-arrow reader', async () => {
    const { db, config } = t();
    const out = join(dir, 'daily.arrow');
    await exportSnapshot(db, config, { set: 'daily', cutoff: '2024-01-31', out, format: 'arrow' });
    const table = tableFromIPC(readFileSync(out));
    expect(table.schema.fields.map((f) => `${f.name}:${f.type}`)).toEqual([
      'item_id:Utf8',
      'store_id:Utf8',
      'day:Date32<DAY>',
      'is_predict:Bool',
      'label:Int32',
      'lag_7:Float64',
      'mean_28:Float64',
      'price_ratio:Float64',
    ]);
    const want = await expected();
    const cols = table.schema.fields.map((f) => table.getChild(f.name)!);
    const got = want.map((_, i) =>
      cols.map((c, j) => {
        const v = c.get(i);
        return j === 2 ? new Date(v as number).toISOString().slice(0, 10) : v;
      }),
    );
    sameValues(got, want);
  });
});

describe('order, atomicity and errors', () => {
  test('a table stored out of order is exported sorted, byte-identical to an ordered one', async () => {
    const { db, config } = t();
    await makeSnapshot(db, {
      ...SPEC,
      set: 'scrambled',
      table: 'snap_scrambled',
      series: 7,
      days: 60,
      scramble: true,
    });
    await makeSnapshot(db, { ...SPEC, set: 'ordered', table: 'snap_ordered', series: 7, days: 60 });
    const a = await exportSnapshot(db, config, {
      set: 'scrambled',
      cutoff: SPEC.cutoff,
      out: join(dir, 's.csv'),
      format: 'csv',
    });
    const b = await exportSnapshot(db, config, {
      set: 'ordered',
      cutoff: SPEC.cutoff,
      out: join(dir, 'o.csv'),
      format: 'csv',
    });
    expect(a.sha256).toBe(b.sha256);
    expect(a.rowCount).toBe(7 * 88);
    // The connection the abandoned physical read ran on is still usable.
    expect((await db.query<{ one: number }>('SELECT 1 AS one')).rows[0]!.one).toBe(1);
  });

  test('a failed export leaves the earlier file in place and no partial file', async () => {
    const { db, config } = t();
    const out = join(dir, 'keep.csv');
    writeFileSync(out, 'earlier export\n');
    await db.exec(
      `CREATE TABLE snap_broken (series_id int4, day date, origin date, is_predict bool, label int4, lag_7 float8)`,
    );
    await db.query(
      `INSERT INTO snapshots (set_name, cutoff, definition_hash, data_fingerprint, table_name, mode, horizon, columns,
         row_count, train_rows, predict_rows, timings, train_from, fingerprint_parts, codes, definition)
       VALUES ('broken', '2024-01-31', 'x', 'y', 'snap_broken', 'shift', 28, $1, 0, 0, 0, '{}', '2024-01-01', '{}', '{}', '{}')`,
      [
        JSON.stringify([
          { name: 'lag_7', type: 'float8' },
          { name: 'missing_col', type: 'float8' },
        ]),
      ],
    );
    await expect(
      exportSnapshot(db, config, { set: 'broken', cutoff: '2024-01-31', out, format: 'csv' }),
    ).rejects.toThrow(/missing_col/);
    expect(readFileSync(out, 'utf8')).toBe('earlier export\n');
    expect(readdirSync(dir).filter((f) => f.includes('partial'))).toEqual([]);
    expect(existsSync(`${out}.manifest.json`)).toBe(false);
  });

  test('unknown set, cutoff, column or format are clear errors', async () => {
    const { db, config } = t();
    const out = join(dir, 'x.parquet');
    await expect(exportSnapshot(db, config, { set: 'nope', cutoff: '2024-01-31', out })).rejects.toThrow(
      /no snapshot of set 'nope' at cutoff 2024-01-31/,
    );
    await expect(exportSnapshot(db, config, { set: 'daily', cutoff: '2024-31-01', out })).rejects.toThrow(
      /not a valid day/,
    );
    await expect(
      exportSnapshot(db, config, { set: 'daily', cutoff: '2024-01-31', out, columns: ['lag_8'] }),
    ).rejects.toThrow(/unknown feature column\(s\) lag_8 .* available: lag_7, mean_28, price_ratio/);
    await expect(
      exportSnapshot(db, config, { set: 'daily', cutoff: '2024-01-31', out, format: 'xlsx' as 'csv' }),
    ).rejects.toThrow(/format must be one of parquet, csv, arrow/);
  });

  test('an opened snapshot that was rebuilt since refuses to mix builds', async () => {
    const { db } = t();
    const spec = { ...SPEC, set: 'rebuilt', table: 'snap_rebuilt', series: 2, days: 10 };
    await makeSnapshot(db, spec);
    const opened = await openSnapshot({ set: 'rebuilt', cutoff: SPEC.cutoff, db });
    await makeSnapshot(db, spec); // a new catalogue row, as a rebuild makes
    await expect(
      (async () => {
        for await (const _ of opened) {
          // unreachable
        }
      })(),
    ).rejects.toThrow(/was rebuilt since it was opened/);
  });

  test('an origin-mode snapshot exports its origin column, rows in (series, origin, day) order', async () => {
    const { db, config } = t();
    await makeSnapshot(db, {
      ...SPEC,
      set: 'origins',
      table: 'snap_origins',
      series: 3,
      days: 5,
      horizon: 2,
      mode: 'origin',
      scramble: true,
    });
    const out = join(dir, 'origins.parquet');
    const r = await exportSnapshot(db, config, { set: 'origins', cutoff: SPEC.cutoff, out });
    expect(r.rowCount).toBe(3 * 7 * 2);
    const d = await duck.runAndReadAll(
      `SELECT item_id, strftime(origin, '%Y-%m-%d') AS o, strftime(day, '%Y-%m-%d') AS d FROM read_parquet('${out}')`,
    );
    expect(d.columnNames()).toEqual(['item_id', 'o', 'd']);
    const rows = d.getRows().map((x) => x.map(String));
    const want = (
      await db.query<{ item_id: string; o: string; d: string }>(
        `SELECT s.item_id, x.origin::text AS o, x.day::text AS d FROM snap_origins x JOIN series s USING (series_id)
         ORDER BY x.series_id, x.origin, x.day`,
      )
    ).rows.map((x) => [x.item_id, x.o, x.d]);
    expect(rows).toEqual(want);
    const m = JSON.parse(readFileSync(r.manifestPath, 'utf8'));
    expect(m.columns[3]).toMatchObject({ name: 'origin', type: 'date' });
    expect(m.mode).toBe('origin');
  });
});
