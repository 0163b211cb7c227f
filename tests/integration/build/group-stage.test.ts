import { describe, expect, test } from 'vitest';
import { type GroupMap, readStagedGroups } from '../../../src/build/group-stage.js';
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
});
