import { describe, expect, it } from 'vitest';
import { parseDay } from '../../src/core/days.js';
import { drainable, readPredictRows } from '../../src/publish/predict-rows.js';
import { useTestDb } from '../helpers/db.js';

// PostgreSQL is the reference: its binary COPY of a table decoded here must equal the same rows
// read back as text (float8 text output is exact in PostgreSQL 12+: shortest round-trip digits).
const t = useTestDb(import.meta.url);

async function collect(source: AsyncIterable<Uint8Array>, F: number, batch = 8192) {
  const rows: [number, number, number[]][] = [];
  for await (const b of readPredictRows(source, F, batch)) {
    for (let r = 0; r < b.length; r++) {
      rows.push([b.seriesIds[r]!, b.days[r]!, Array.from(b.values.subarray(r * F, (r + 1) * F))]);
    }
  }
  return rows;
}

async function* rechunk(source: AsyncIterable<Uint8Array>, size: number) {
  for await (const c of source) for (let i = 0; i < c.byteLength; i += size) yield c.subarray(i, i + size);
}

describe('readPredictRows', () => {
  it('decodes series, day and float8 cells (NULL as NaN) exactly, across any chunk boundaries', async () => {
    const { db } = t();
    await db.exec(`CREATE TABLE pr (series_id int4, day date, a float8, b float8, c float8);
      INSERT INTO pr SELECT g, DATE '2024-02-27' + g % 5, CASE WHEN g % 7 = 0 THEN NULL ELSE g / 3.0 END,
        -g * 1e-300, CASE WHEN g % 11 = 0 THEN 'Infinity'::float8 ELSE sqrt(g) END FROM generate_series(1, 3000) g;`);
    const want = (
      await db.query<{ s: number; d: string; a: string | null; b: string; c: string }>(
        'SELECT series_id AS s, day::text AS d, a::text AS a, b::text AS b, c::text AS c FROM pr ORDER BY series_id',
      )
    ).rows.map((r) => [
      r.s,
      parseDay(r.d)!,
      [r.a === null ? Number.NaN : Number(r.a), Number(r.b), Number(r.c)],
    ]);
    const copy = 'COPY (SELECT series_id, day, a, b, c FROM pr ORDER BY series_id) TO STDOUT (FORMAT binary)';
    expect(await collect(db.copyTo(copy), 3)).toEqual(want);
    for (const size of [1, 7, 61, 4096])
      expect(await collect(rechunk(db.copyTo(copy), size), 3, 500), `chunks of ${size}`).toEqual(want);
  });

  it('names what is wrong with a stream of another shape; the drained connection stays usable', async () => {
    const { db } = t();
    const cases: [string, string][] = [
      ['SELECT series_id, day, a, b FROM pr', 'a row has 4 fields, expected 5'],
      ['SELECT series_id, day, a, b, series_id FROM pr', 'feature column 3 has 4 bytes, expected a float8'],
      ['SELECT series_id, NULL::date, a, b, c FROM pr', 'series_id or day is NULL'],
    ];
    for (const [select, message] of cases) {
      await db.session(async (s) => {
        const source = drainable(s.copyTo(`COPY (${select}) TO STDOUT (FORMAT binary)`));
        await expect(collect(source, 3)).rejects.toThrow(message);
        await source.drain();
        expect((await s.query<{ n: number }>('SELECT count(*)::int AS n FROM pr')).rows[0]?.n).toBe(3000);
      });
    }
    await db.session(async (s) => {
      const source = drainable(s.copyTo('COPY (SELECT series_id, day, a, b, c FROM pr) TO STDOUT'));
      await expect(collect(source, 3)).rejects.toThrow('not a binary COPY stream');
      await source.drain();
    });
  });
});
