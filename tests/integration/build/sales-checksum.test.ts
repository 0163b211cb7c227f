import { describe, expect, test } from 'vitest';
import { SalesChecksum } from '../../../src/build/fingerprint.js';
import { readCopyBinary } from '../../../src/db/binary-copy.js';
import { useTestDb } from '../../helpers/db.js';

const t = useTestDb(import.meta.url);

describe('SalesChecksum', () => {
  // The reference is PostgreSQL itself: its hashint8extended and an exact numeric sum, the
  // statement the fingerprint runs when the build does not read the sales itself.
  test('equals the server computing the fingerprint statement, over edge values', async () => {
    const { db } = t();
    await db.exec(`CREATE TABLE ck (series_id int4, day date, units int4);
      INSERT INTO ck
        SELECT (abs(hashint4(k)) % 2000000) + 1, DATE '1970-01-01' + (abs(hashint4(k + 7)) % 40000) - 3000,
               CASE k % 5 WHEN 0 THEN 0 WHEN 1 THEN -(k % 97) WHEN 2 THEN 2147483647 - k ELSE k % 1000 END
        FROM generate_series(1, 200000) k;
      INSERT INTO ck VALUES (1, DATE '1900-01-01', 1), (2147483647 / 100000, DATE '2200-12-31', -2147483648),
        (21474, DATE '2024-02-29', 0), (1, DATE '1970-01-01', -1)`);
    const ref = (
      await db.query<{ n: number; h: string }>(
        `SELECT count(*)::int8 AS n, coalesce(sum(hashint8extended(series_id::int8 * 100000 + (day - DATE '1970-01-01'), units)), 0)::text AS h FROM ck`,
      )
    ).rows[0]!;
    const whole = new SalesChecksum();
    for await (const b of readCopyBinary(
      db.copyTo('COPY (SELECT series_id, day, units FROM ck) TO STDOUT (FORMAT binary)'),
      ['int4', 'date', 'int4'],
      4096,
    )) {
      const [ids, days, units] = b.columns as [Int32Array, Int32Array, Int32Array];
      whole.add(ids, days, units, b.length);
    }
    expect(whole.part()).toEqual({ rows: Number(ref.n), checksum: ref.h });
    expect(new SalesChecksum().part()).toEqual({ rows: 0, checksum: '0' });
  });
});
