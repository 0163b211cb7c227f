import { describe, expect, test } from 'vitest';
import { stageChainGroups } from '../../../src/build/chain-groups.js';
import { type GroupMap, readStagedGroups } from '../../../src/build/group-stage.js';
import type { DbSession } from '../../../src/db/database.js';
import type { GroupLevel } from '../../../src/features/group-levels.js';
import { KEY_SEP } from '../../../src/features/group-levels.js';
import { useTestDb } from '../../helpers/db.js';

const t = useTestDb(import.meta.url);

const BASE = 19000;
const CUTOFF = BASE + 9;

/** A staged table in the layout chain-groups.ts writes: per key, (offset, total, n) records. */
async function stage(scale: number): Promise<void> {
  const { db } = t();
  await db.exec(`DROP TABLE IF EXISTS staged_g;
    CREATE UNLOGGED TABLE staged_g (level text NOT NULL, k1 text NOT NULL, k2 text, days bytea NOT NULL);
    INSERT INTO staged_g
      SELECT 'item_region', 'item' || i, 'region' || r,
        (SELECT string_agg(int4send(d) || float8send((${scale} * (i * 100 + r * 10 + d))::float8) || int4send(r + 1), ''::bytea ORDER BY d)
         FROM generate_series(0, 9) d)
      FROM generate_series(1, 4) i, generate_series(0, 2) r;`);
}

const wanted = (keys: string[]) => new Map<GroupLevel, Set<string>>([['item_region', new Set(keys)]]);
const key = (i: number, r: number) => `item${i}${KEY_SEP}region${r}`;

async function read(keys: string[]): Promise<GroupMap> {
  const into: GroupMap = new Map();
  await readStagedGroups(t().db, 'staged_g', wanted(keys), BASE, CUTOFF, into);
  return into;
}

describe('staged group totals', () => {
  test('later partitions of one table get the same totals, and a table planned again is read again', async () => {
    await stage(1);
    // Expected values follow from the INSERT above (worked by hand: total = i*100 + r*10 + d).
    const first = await read([key(1, 0), key(2, 0)]);
    expect(Array.from(first.get('item_region')!.get(key(2, 0))!.total)).toEqual(
      Array.from({ length: 10 }, (_, d) => 200 + d),
    );
    // A second partition wants keys already read and new ones (and one the table lacks).
    const second = await read([key(2, 0), key(3, 1), 'item9\u001fregion9']);
    const g = second.get('item_region')!;
    expect([...g.keys()].sort()).toEqual([key(2, 0), key(3, 1)]);
    expect(Array.from(g.get(key(3, 1))!.total)).toEqual(Array.from({ length: 10 }, (_, d) => 310 + d));
    expect(Array.from(g.get(key(3, 1))!.n)).toEqual(new Array(10).fill(2));
    expect(g.get(key(2, 0))).toBe(first.get('item_region')!.get(key(2, 0)));

    // Dropped and staged again under the same name (another plan): nothing is taken from before.
    await stage(2);
    const again = await read([key(2, 0)]);
    expect(Array.from(again.get('item_region')!.get(key(2, 0))!.total)).toEqual(
      Array.from({ length: 10 }, (_, d) => 2 * (200 + d)),
    );
  });

  test('the process that staged the totals reads them from memory, equal to what the table gives back', async () => {
    const { db } = t();
    await db.exec(`
      INSERT INTO stores VALUES ('s1', 'north'), ('s2', 'north'), ('s3', 'south');
      INSERT INTO items VALUES ('i1', 'dairy', 'fresh'), ('i2', 'dairy', 'fresh'), ('i3', 'bakery', 'fresh');
      INSERT INTO series (item_id, store_id) SELECT i, s FROM unnest(ARRAY['i1','i2','i3']) i, unnest(ARRAY['s1','s2','s3']) s;
      INSERT INTO sales (series_id, day, units)
        SELECT series_id, DATE '1970-01-01' + ${BASE} + d, (series_id * 7 + d * 3) % 5
        FROM series, generate_series(0, 9) d WHERE (series_id + d) % 4 <> 0;`);
    const levels: GroupLevel[] = ['item_region', 'item', 'department'];
    await stageChainGroups(db, 'chain_g', levels, BASE, CUTOFF, 2);
    const wantedAll = new Map<GroupLevel, Set<string>>([
      [
        'item_region',
        new Set(['i1', 'i2', 'i3'].flatMap((i) => [`${i}${KEY_SEP}north`, `${i}${KEY_SEP}south`])),
      ],
      ['item', new Set(['i1', 'i2', 'i3'])],
      ['department', new Set(['dairy', 'bakery', 'frozen'])],
    ]);
    // Counts the COPYs a read sends.
    let copies = 0;
    const counting: DbSession = new Proxy(db, {
      get(target, prop, receiver) {
        if (prop === 'copyTo')
          return (sql: string) => {
            copies++;
            return target.copyTo(sql);
          };
        const v = Reflect.get(target, prop, receiver);
        return typeof v === 'function' ? v.bind(target) : v;
      },
    });
    const seeded: GroupMap = new Map();
    await readStagedGroups(counting, 'chain_g', wantedAll, BASE, CUTOFF, seeded);
    // Only the key no series has ('frozen') is asked of the table.
    expect(copies).toBe(1);
    // The same totals read back from a copy of the table (another name: nothing cached).
    await db.exec('CREATE TABLE chain_g2 AS SELECT * FROM chain_g');
    const readBack: GroupMap = new Map();
    await readStagedGroups(db, 'chain_g2', wantedAll, BASE, CUTOFF, readBack);
    for (const level of levels) {
      const a = seeded.get(level)!;
      const b = readBack.get(level)!;
      expect([...a.keys()].sort()).toEqual([...b.keys()].sort());
      for (const [k, g] of a) {
        expect(Array.from(g.total)).toEqual(Array.from(b.get(k)!.total));
        expect(Array.from(g.n)).toEqual(Array.from(b.get(k)!.n));
        expect(g.base).toBe(b.get(k)!.base);
      }
    }
    // Worked by hand from the INSERT: item i1 in the north (stores s1, s2) on the first day.
    const { rows } = await db.query<{ total: number; n: number }>(
      `SELECT sum(units)::float8 AS total, count(*)::int AS n FROM sales JOIN series USING (series_id)
       WHERE item_id = 'i1' AND store_id IN ('s1', 's2') AND day = DATE '1970-01-01' + ${BASE}`,
    );
    const north = seeded.get('item_region')!.get(`i1${KEY_SEP}north`)!;
    expect([north.total[0], north.n[0]]).toEqual([rows[0]!.total, rows[0]!.n]);
  });
});
