import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import fc from 'fast-check';
import { afterAll, expect, test } from 'vitest';
import { InputError } from '../../src/db/errors.js';
import { CsvRecords, RAW_LIMIT } from '../../src/load/csv-records.js';

const dir = mkdtempSync(join(tmpdir(), 'larder-csv-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));
let n = 0;

async function read(content: string | Buffer, chunkSize?: number) {
  const file = join(dir, `f${n++}.csv`);
  writeFileSync(file, content);
  const r = new CsvRecords(file);
  const out: Array<{ line: number; fields: string[]; raw: string }> = [];
  const res = await r.read(
    (fields, line, s, e) => out.push({ line, fields, raw: r.raw(s, e) }),
    chunkSize ? { chunkSize } : {},
  );
  return { ...res, out };
}

async function error(content: string | Buffer): Promise<string> {
  try {
    await read(content);
  } catch (e) {
    expect(e).toBeInstanceOf(InputError);
    return (e as Error).message;
  }
  throw new Error('expected an InputError');
}

// RFC 4180 section 2 (from memory): fields holding the delimiter, quotes or line breaks are
// quoted; a quote inside a quoted field is doubled; CRLF ends a record.
test('RFC 4180 quoting: embedded delimiters, doubled quotes and line breaks; lines counted physically', async () => {
  const text = 'a,b,c\r\n"x,1","say ""hi""",z\r\n"multi\r\nline\r\nfield",2,3\r\nlast,4,5';
  for (const chunk of [undefined, 1, 2, 3, 7]) {
    const { out, delimiter } = await read(text, chunk);
    expect(delimiter).toBe(',');
    expect(out.map((r) => [r.line, r.fields])).toEqual([
      [1, ['a', 'b', 'c']],
      [2, ['x,1', 'say "hi"', 'z']],
      [3, ['multi\r\nline\r\nfield', '2', '3']],
      [6, ['last', '4', '5']],
    ]);
    expect(out[2]!.raw).toBe('"multi\r\nline\r\nfield",2,3');
  }
});

test('a UTF-8 BOM is dropped, blank lines are skipped but counted, semicolons and tabs are sniffed', async () => {
  const { out } = await read('\uFEFFitem_id;units\n\nA;1\n\n\nB;2\n');
  expect(out.map((r) => [r.line, r.fields])).toEqual([
    [1, ['item_id', 'units']],
    [3, ['A', '1']],
    [6, ['B', '2']],
  ]);
  const tab = await read('a\tb\n"1\t2"\t3\n');
  expect(tab.delimiter).toBe('\t');
  expect(tab.out[1]!.fields).toEqual(['1\t2', '3']);
});

test('gzip is recognised by its magic bytes, whatever the name', async () => {
  const { out } = await read(gzipSync('a,b\n1,2\n'));
  expect(out.map((r) => r.fields)).toEqual([
    ['a', 'b'],
    ['1', '2'],
  ]);
});

test('raw lines are cut at 1 KB without splitting a character; NUL is shown as U+2400', async () => {
  const long = `${'é'.repeat(700)},x`;
  const { out } = await read(`a,b\n${long}\nq\u0000,1\n`);
  expect(Buffer.byteLength(out[1]!.raw)).toBeLessThanOrEqual(RAW_LIMIT);
  expect(out[1]!.raw).toBe('é'.repeat(512));
  expect(out[2]!.raw).toBe('q\u2400,1');
  expect(out[2]!.fields[0]).toBe('q\u0000');
});

test.each([
  ['', 'empty file (no header line)'],
  ['\uFEFF', 'empty file (no header line)'],
  ['\n\n', 'empty file (no header line)'],
  ['a,b\n1,"open\n2,3\n', 'line 2: a quoted field is never closed'],
])('%j -> %s', async (content, message) => {
  expect(await error(content)).toContain(message);
});

test('invalid UTF-8 names its line; UTF-16 gets a hint; a truncated gzip is named as such', async () => {
  const bad = Buffer.concat([Buffer.from('a,b\n1,2\n3,'), Buffer.from([0xc3, 0x28]), Buffer.from('\n')]);
  expect(await error(bad)).toMatch(/line 3: invalid UTF-8 \(byte offset 10\)$/);
  expect(await error(Buffer.from('\uFEFFa,b\n', 'utf16le'))).toContain('save the file as UTF-8');
  const gz = gzipSync('a,b\n'.repeat(5000));
  expect(await error(gz.subarray(0, gz.length - 20))).toContain('truncated or corrupt gzip data');
  expect(await error(Buffer.from([0x1f, 0x8b, 0x08, 0x00]))).toContain('truncated or corrupt gzip data');
});

test('a stray quote cannot swallow the rest of a big file: the record length is bounded', async () => {
  const rows = 'I1,S1,2024-01-01,1\n'.repeat(70_000); // 1.3 MB after the stray quote
  expect(await error(`a,b,c,d\nI1,"S1,2024-01-01,1\n${rows}`)).toContain(
    'line 2: a record is longer than 1,000,000 characters (an unbalanced quote?)',
  );
});

test('a missing file is an InputError naming it', async () => {
  const r = new CsvRecords(join(dir, 'absent.csv'));
  await expect(r.read(() => {})).rejects.toThrow(/absent\.csv: cannot read the file/);
});

const field = fc.oneof(
  fc.stringMatching(/^[a-z0-9]{0,6}$/),
  fc.constantFrom('x,y', 'q"uote', '\n', 'a\r\nb', '""', ' sp ', 'é中'),
);

test('records written per RFC 4180 read back with the physical line each starts on, for any chunking', async () => {
  await fc.assert(
    fc.asyncProperty(
      fc.array(fc.array(field, { minLength: 2, maxLength: 2 }), { minLength: 1, maxLength: 12 }),
      fc.constantFrom('\n', '\r\n'),
      fc.integer({ min: 1, max: 64 }),
      fc.boolean(),
      async (rows, eol, chunk, lastEol) => {
        const quote = (f: string) => (/[",\r\n]/.test(f) || f === '' ? `"${f.replaceAll('"', '""')}"` : f);
        let text = `h1,h2${eol}`;
        let line = 2;
        const expected: Array<[number, string[]]> = [];
        for (const r of rows) {
          const rec = r.map(quote).join(',');
          expected.push([line, r]);
          line += (rec.match(/\n/g) ?? []).length + 1;
          text += rec + eol;
        }
        if (!lastEol) text = text.slice(0, -eol.length);
        const { out } = await read(text, chunk);
        expect(out.slice(1).map((o) => [o.line, o.fields])).toEqual(expected);
      },
    ),
    { numRuns: 150 },
  );
});
