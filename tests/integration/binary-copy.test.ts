import { expect, test } from 'vitest';
import { CopyBinaryWriter, readCopyBinary, readCopyTuples } from '../../src/db/binary-copy.js';
import { parseDay } from '../../src/core/days.js';
import { useTestDb } from '../helpers/db.js';

const t = useTestDb(import.meta.url);

test('binary COPY rows written by the writer read back identically through the server', async () => {
  const { db } = t();
  await db.exec('CREATE TABLE bc (a int4, d date, x float8, s text, b bool, big int8)');
  const w = new CopyBinaryWriter(256); // tiny chunks exercise tuple splitting across chunks
  const n = 5000;
  const base = parseDay('2019-03-01')!;
  for (let i = 0; i < n; i++) {
    w.row(6);
    w.int4(i - 100);
    w.date(base + i);
    w.float8(i % 7 === 0 ? Number.NaN : i / 3);
    w.text(`é${i}"'`);
    w.bool(i % 2 === 0);
    w.int8(2 ** 40 + i);
  }
  const chunks = [...w.take(), ...w.end()];
  expect(await db.copyFrom('COPY bc FROM STDIN (FORMAT binary)', chunks)).toBe(n);
  const check = await db.query<{ d: string; x: number | null }>(
    'SELECT d, x FROM bc WHERE a = -100 OR a = -99 ORDER BY a',
  );
  // Postgres' own rendering of the dates we wrote is the outside check on the epoch offset.
  expect(check.rows).toEqual([
    { d: '2019-03-01', x: null },
    { d: '2019-03-02', x: 1 / 3 },
  ]);
  let seen = 0;
  for await (const b of readCopyBinary(
    db.copyTo('COPY (SELECT * FROM bc ORDER BY a) TO STDOUT (FORMAT binary)'),
    ['int4', 'date', 'float8', 'text', 'bool', 'int8'],
    777,
  )) {
    for (let r = 0; r < b.length; r++, seen++) {
      const i = seen;
      expect((b.columns[0] as Int32Array)[r]).toBe(i - 100);
      expect((b.columns[1] as Int32Array)[r]).toBe(base + i);
      if (i % 7 === 0) expect(b.nulls[2]![r]).toBe(1);
      else expect((b.columns[2] as Float64Array)[r]).toBe(i / 3);
      expect((b.columns[3] as string[])[r]).toBe(`é${i}"'`);
      expect((b.columns[4] as Uint8Array)[r]).toBe(i % 2 === 0 ? 1 : 0);
      expect((b.columns[5] as Float64Array)[r]).toBe(2 ** 40 + i);
    }
  }
  expect(seen).toBe(n);
});

test('a COPY read abandoned early leaves the pool and the session usable', async () => {
  const { db } = t();
  for (let i = 0; i < 6; i++) {
    for await (const _ of db.copyTo('COPY (SELECT g FROM generate_series(1, 200000) g) TO STDOUT')) break;
    expect((await db.query<{ n: number }>('SELECT 1::int AS n')).rows).toEqual([{ n: 1 }]);
  }
  await db.session(async (s) => {
    for await (const _ of s.copyTo('COPY (SELECT g FROM generate_series(1, 200000) g) TO STDOUT')) break;
    expect((await s.query<{ n: number }>('SELECT 2::int AS n')).rows).toEqual([{ n: 2 }]);
  });
});

test('bytea, text and NULL fields read back by the tuple reader across chunk boundaries', async () => {
  const { db } = t();
  await db.exec('CREATE TABLE bt (k int4, s text, v bytea)');
  const w = new CopyBinaryWriter(300); // small chunks: tuples are split between them
  const n = 2000;
  const bytesOf = (i: number) => Uint8Array.from({ length: i % 37 }, (_, j) => (i * 31 + j) & 255);
  for (let i = 0; i < n; i++) {
    w.row(3);
    w.int4(i);
    if (i % 11 === 0) w.null();
    else w.text(`ü${i}`);
    w.bytea(bytesOf(i));
  }
  const chunks = [...w.take(), ...w.end()];
  expect(await db.copyFrom('COPY bt FROM STDIN (FORMAT binary)', chunks)).toBe(n);
  // PostgreSQL's own reading of what was written: the outside check on the bytea framing.
  const md5 = await db.query<{ v: string }>(`SELECT encode(v, 'hex') AS v FROM bt WHERE k = 40`);
  expect(md5.rows[0]!.v).toBe(Buffer.from(bytesOf(40)).toString('hex'));
  const text = new TextDecoder();
  // The writer's own 300-byte chunks, then the server's stream of the stored rows.
  const sources = [
    (async function* () {
      yield* chunks;
    })(),
    db.copyTo('COPY (SELECT k, s, v FROM bt ORDER BY k) TO STDOUT (FORMAT binary)'),
  ];
  for (const source of sources) {
    let seen = 0;
    const rows = await readCopyTuples(source, 3, (dv, bytes, at) => {
      const i = seen++;
      expect(dv.getInt32(at[0]!)).toBe(i);
      if (i % 11 === 0) expect(at[3]).toBe(-1);
      else expect(text.decode(bytes.subarray(at[2]!, at[2]! + at[3]!))).toBe(`ü${i}`);
      expect(Buffer.from(bytes.subarray(at[4]!, at[4]! + at[5]!)).equals(Buffer.from(bytesOf(i)))).toBe(true);
    });
    expect(rows).toBe(n);
    expect(seen).toBe(n);
  }
});
