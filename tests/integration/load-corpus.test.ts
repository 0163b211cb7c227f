import { gzipSync } from 'node:zlib';
import { beforeAll, describe, expect, test } from 'vitest';
import { parseConfig } from '../../src/config/config.js';
import { InputError } from '../../src/db/errors.js';
import { type LoadRequest, loadFiles } from '../../src/load/load-files.js';
import type { LoadTarget } from '../../src/load/targets.js';
import { useTestDb } from '../helpers/db.js';
import { BASE, checksums, dump, useTempDir } from './load-helpers.js';

// The bad-file corpus of docs/loading.md ("Bad files and what happens"): each file is loaded on
// top of a stored chain and must give its documented outcome, with every stored table unchanged
// afterwards (md5 of each table's ordered rows, and of the series ids).

const t = useTestDb(import.meta.url);
const file = useTempDir('larder-corpus-');
let base: Record<string, string>;

beforeAll(async () => {
  const { db, config } = t();
  const files = Object.fromEntries(Object.entries(BASE).map(([k, v]) => [k, file(`base-${k}.csv`, v)]));
  expect((await loadFiles(db, config, { files })).ok).toBe(true);
  base = await checksums(db);
});

const H = 'item_id,store_id,day,units\n';
const utf8 = (s: string) => Buffer.from(s, 'utf8');

interface Refused {
  readonly name: string;
  readonly target?: LoadTarget;
  readonly content: string | Buffer;
  readonly fileName?: string;
  readonly req?: Partial<LoadRequest>;
  /** A rejected row: its line and reason; or a hard file error: the message. */
  readonly rejected?: { readonly line: number; readonly reason: string; readonly otherLine?: number };
  readonly error?: string | RegExp;
}

const refused: Refused[] = [
  {
    name: 'ragged row (too few fields)',
    content: `${H}I1,S1,2024-05-01,1\nI1,S1,2024-05-02\n`,
    rejected: { line: 3, reason: 'wrong number of fields: expected 4, got 3' },
  },
  {
    name: 'ragged row (too many fields)',
    content: `${H}I1,S1,2024-05-01,1,9\n`,
    rejected: { line: 2, reason: 'wrong number of fields: expected 4, got 5' },
  },
  {
    name: 'missing header column',
    content: 'item_id,store_id,day\nI1,S1,2024-05-01\n',
    error: 'line 1 (header): missing required column "units"',
  },
  {
    name: 'duplicate header column',
    content: 'item_id,store_id,day,units,day\n',
    error: 'duplicate column "day" (columns 3 and 5)',
  },
  {
    name: 'unknown column',
    content: 'item_id,store_id,day,units,colour\nI1,S1,2024-05-01,1,red\n',
    error: 'unknown column "colour"',
  },
  {
    name: 'fractional units',
    content: `${H}I1,S1,2024-05-01,2.5\n`,
    rejected: { line: 2, reason: 'units "2.5" is not an integer (fractional units cannot be stored)' },
  },
  {
    name: 'non-numeric units',
    content: `${H}I1,S1,2024-05-01,three\n`,
    rejected: { line: 2, reason: 'units "three" is not an integer' },
  },
  {
    name: 'units past int4',
    content: `${H}I1,S1,2024-05-01,2147483648\n`,
    rejected: { line: 2, reason: 'units "2147483648" is outside the int4 range (-2147483648 to 2147483647)' },
  },
  // Gregorian leap-year rule (ISO 8601): 2023 is not a leap year, nor is 1900 (a century not divisible by 400).
  {
    name: 'impossible day 2023-02-29',
    content: `${H}I1,S1,2023-02-29,1\n`,
    rejected: { line: 2, reason: 'day "2023-02-29" is not a valid ISO 8601 day (YYYY-MM-DD)' },
  },
  {
    name: 'impossible day 1900-02-29',
    content: `${H}I1,S1,1900-02-29,1\n`,
    rejected: { line: 2, reason: 'day "1900-02-29" is not a valid ISO 8601 day (YYYY-MM-DD)' },
  },
  {
    name: 'day not in ISO 8601 form',
    content: `${H}I1,S1,05/01/2024,1\n`,
    rejected: { line: 2, reason: 'day "05/01/2024" is not a valid ISO 8601 day (YYYY-MM-DD)' },
  },
  { name: 'empty file', content: '', error: 'empty file (no header line)' },
  {
    name: 'truncated gzip',
    fileName: 'cut.csv.gz',
    content: gzipSync(`${H}I1,S1,2024-05-01,1\n`.repeat(3000)).subarray(0, 200),
    error: 'truncated or corrupt gzip data',
  },
  {
    name: 'invalid UTF-8',
    content: Buffer.concat([
      utf8(`${H}I1,S1,2024-05-01,1\nI`),
      Buffer.from([0xff]),
      utf8(',S1,2024-05-02,1\n'),
    ]),
    error: /line 3: invalid UTF-8 \(byte offset \d+\)/,
  },
  { name: 'UTF-16 file', content: Buffer.from(`\uFEFF${H}`, 'utf16le'), error: 'save the file as UTF-8' },
  {
    name: 'quoted field never closed',
    content: `${H}I1,S1,2024-05-01,1\n"I2,S1,2024-05-01,1\n`,
    error: 'line 3: a quoted field is never closed',
  },
  {
    name: 'duplicate key in the file',
    content: `${H}I1,S1,2024-05-01,1\nI2,S1,2024-05-01,1\nI1,S1,2024-05-01,2\n`,
    rejected: { line: 4, reason: 'duplicate key ["I1","S1","2024-05-01"]: also on line 2', otherLine: 2 },
  },
  {
    name: 'append of a stored key',
    content: `${H}I1,S1,2024-05-01,1\nI2,S2,2024-02-26,1\n`,
    rejected: { line: 3, reason: 'key already stored: ["I2","S2","2024-02-26"]' },
  },
  {
    name: 'control character in a key',
    content: `${H}I1\u0007,S1,2024-05-01,1\n`,
    rejected: { line: 2, reason: 'item_id contains a control character (U+0007) at position 3' },
  },
  {
    name: 'quoted newline inside a key',
    content: `${H}"I1\nI2",S1,2024-05-01,1\n`,
    rejected: { line: 2, reason: 'item_id contains a control character (U+000A) at position 3' },
  },
  {
    name: 'over-long key',
    content: `${H}${'I'.repeat(65)},S1,2024-05-01,1\n`,
    rejected: { line: 2, reason: 'item_id is longer than 64 characters' },
  },
  { name: 'empty key', content: `${H},S1,2024-05-01,1\n`, rejected: { line: 2, reason: 'item_id is empty' } },
  {
    name: 'price with 5 decimals',
    target: 'prices',
    content: 'item_id,store_id,week_start,price\nI1,S1,2024-05-04,1.23456\n',
    rejected: { line: 2, reason: 'price "1.23456" has more than 4 decimals' },
  },
  {
    name: 'wide header with an impossible day',
    content: 'item_id,store_id,2023-02-28,2023-02-29\nI1,S1,1,2\n',
    req: { layout: 'wide' },
    error: 'column "2023-02-29" is neither item_id, store_id nor a valid ISO 8601 day',
  },
  {
    name: 'wide line with one bad cell',
    content: 'item_id,store_id,2024-05-01,2024-05-02\nI1,S1,1,0.5\n',
    rejected: {
      line: 2,
      reason: 'units in column 2024-05-02 "0.5" is not an integer (fractional units cannot be stored)',
    },
  },
];

describe('refused files leave every stored table unchanged', () => {
  test.each(refused)('$name', async (c) => {
    const { db, config } = t();
    const target = c.target ?? 'sales';
    const path = file(c.fileName ?? `${c.name.replace(/\W+/g, '-')}.csv`, c.content);
    const batches = await db.query<{ n: number }>('SELECT count(*)::int AS n FROM load_batches');
    const req: LoadRequest = { files: { [target]: path }, ...c.req };
    if (c.error) {
      const err = await loadFiles(db, config, req).then(
        () => null,
        (e: unknown) => e,
      );
      expect(err).toBeInstanceOf(InputError);
      expect((err as Error).message).toContain(path);
      if (typeof c.error === 'string') expect((err as Error).message).toContain(c.error);
      else expect((err as Error).message).toMatch(c.error);
      // A hard file error stores nothing, not even a batch row.
      expect((await db.query('SELECT count(*)::int AS n FROM load_batches')).rows).toEqual(batches.rows);
    } else {
      const res = await loadFiles(db, config, req);
      expect(res.ok).toBe(false);
      const b = res.batches[0]!;
      expect(b).toMatchObject({ status: 'rejected', rowsStored: 0 });
      expect(b.firstRejects[0]).toEqual({
        line: c.rejected!.line,
        reason: c.rejected!.reason,
        ...(c.rejected!.otherLine ? { otherLine: c.rejected!.otherLine } : {}),
      });
      // The rejects are recorded after the rollback, with the raw line.
      const r = await db.query<{ file: string; line: number; raw: string }>(
        'SELECT file, line, raw FROM rejected_rows WHERE batch_id = $1 ORDER BY line LIMIT 1',
        [b.batchId],
      );
      expect(r.rows[0]).toMatchObject({ file: path, line: c.rejected!.line });
      expect(r.rows[0]!.raw.length).toBeGreaterThan(0);
    }
    expect(await checksums(db)).toEqual(base);
  });
});

interface Stored {
  readonly name: string;
  readonly content: string | Buffer;
  readonly target?: LoadTarget;
  readonly fileName?: string;
  /** Rows the table holds for the case's keys afterwards. */
  readonly rows: string[];
  readonly table?: 'sales' | 'items';
  readonly config?: Record<string, unknown>;
}

// Everything here uses store SX or items named X*, so the case's rows can be removed afterwards
// and the chain compared with what it was.
const stored: Stored[] = [
  { name: 'UTF-8 BOM', content: `\uFEFF${H}I1,SX,2024-05-01,3\n`, rows: ['(I1,SX,2024-05-01,3)'] },
  {
    name: 'CRLF line ends',
    content: `${H}I1,SX,2024-05-01,3\r\nI1,SX,2024-05-02,4\r\n`
      .replaceAll('\n', '\r\n')
      .replaceAll('\r\r', '\r'),
    rows: ['(I1,SX,2024-05-01,3)', '(I1,SX,2024-05-02,4)'],
  },
  {
    name: 'semicolon delimiter',
    content: 'item_id;store_id;day;units\nI1;SX;2024-05-01;3\n',
    rows: ['(I1,SX,2024-05-01,3)'],
  },
  {
    name: 'tab delimiter',
    content: 'item_id\tstore_id\tday\tunits\nI1\tSX\t2024-05-01\t3\n',
    rows: ['(I1,SX,2024-05-01,3)'],
  },
  {
    name: 'quoted comma in a key',
    content: `${H}"I,1",SX,2024-05-01,3\n`,
    rows: ['("I,1",SX,2024-05-01,3)'],
  },
  {
    name: 'negative units (a return)',
    content: `${H}I1,SX,2024-05-01,-2\n`,
    rows: ['(I1,SX,2024-05-01,-2)'],
  },
  { name: 'unknown item', content: `${H}I404,SX,2024-05-01,1\n`, rows: ['(I404,SX,2024-05-01,1)'] },
  {
    name: 'gzip without .gz in its name',
    fileName: 'packed.csv',
    content: gzipSync(`${H}I1,SX,2024-05-01,3\n`),
    rows: ['(I1,SX,2024-05-01,3)'],
  },
  { name: 'header only', content: H, rows: [] },
  {
    name: 'blank lines between rows',
    content: `${H}\nI1,SX,2024-05-01,3\n\n\n`,
    rows: ['(I1,SX,2024-05-01,3)'],
  },
  {
    name: 'extra column mapped in config',
    content: 'sku,store_id,day,qty,note\nI1,SX,2024-05-01,3,ok\n',
    config: { load: { columns: { sales: { sku: 'item_id', qty: 'units', note: null } } } },
    rows: ['(I1,SX,2024-05-01,3)'],
  },
  {
    name: 'keys with quotes and SQL text',
    target: 'items',
    table: 'items',
    content: 'item_id,dept_id,category_id\n"X1\'); DROP TABLE items; --",D1,C1\n"X2 ""quoted""",D1,\n',
    rows: ['("X1\'); DROP TABLE items; --",D1,C1)', '("X2 ""quoted""",D1,)'],
  },
];

const caseRows = async (table: 'sales' | 'items') => {
  const { db } = t();
  const all = await dump(db, table);
  return table === 'sales' ? all.filter((r) => r.includes(',SX,')) : all.filter((r) => /^\("?X/.test(r));
};

describe('files stored faithfully touch nothing else', () => {
  test.each(stored)('$name', async (c) => {
    const { db, config, schema } = t();
    const target = c.target ?? 'sales';
    const path = file(c.fileName ?? `ok-${c.name.replace(/\W+/g, '-')}.csv`, c.content);
    const cfg = c.config
      ? parseConfig({ ...c.config, database: { url: config.database.url, schema } }, 'test')
      : config;
    const res = await loadFiles(db, cfg, { files: { [target]: path } });
    expect(res.batches[0]).toMatchObject({ status: 'loaded', rowsRejected: 0, rowsStored: c.rows.length });
    expect(await caseRows(c.table ?? 'sales')).toEqual(c.rows);
    await db.exec(
      "DELETE FROM sales WHERE series_id IN (SELECT series_id FROM series WHERE store_id = 'SX'); " +
        "DELETE FROM series WHERE store_id = 'SX'; DELETE FROM items WHERE item_id LIKE 'X%'",
    );
    expect(await checksums(db)).toEqual(base);
  });
});
