import { type Db, quoteIdent } from '../db/database.js';
import { readCopyBinary } from '../db/binary-copy.js';
import { type GroupLevel, KEY_SEP } from '../features/group-levels.js';
import type { GroupSeries } from '../features/family.js';
import { type DenseSeries, readStoreSalesFromBlocks } from './copy-input.js';
import { seedStagedGroups } from './group-stage.js';
import { salesCopySql } from './partition-input.js';
import { RawCopyWriter } from './raw-copy.js';

// Key parts of a series at each chain level (k2 only for item_region).
type Parts = (h: Row) => [string | null, string | null];
interface Row {
  series_id: number;
  item_id: string;
  store_id: string;
  dept_id: string | null;
  category_id: string | null;
  region_id: string | null;
}
const PARTS: Partial<Record<GroupLevel, Parts>> = {
  total: () => ['', null],
  region: (h) => [h.region_id, null],
  category: (h) => [h.category_id, null],
  department: (h) => [h.dept_id, null],
  item: (h) => [h.item_id, null],
  item_region: (h) => [h.item_id, h.region_id],
};

interface LevelTotals {
  readonly level: GroupLevel;
  /** Group index of each series id, -1 when the series has no key at this level. */
  readonly of: Int32Array;
  readonly keys: Array<[string, string | null]>;
  readonly total: Float64Array;
  readonly n: Int32Array;
}

/**
 * Stages the daily totals of the chain-wide group levels over days from..cutoff into `table`
 * (level, k1, k2, days): one streaming pass over the sales, store by store (the partitions' own
 * lateral COPY, `concurrency` stores at a time), summing every level at once into dense typed
 * arrays, then one row per group with its days packed as bytes (int4 day offset, float8 total,
 * int4 members; big-endian; days without members left out). Measured on 2.55M sales rows:
 * 15 s for GROUP BY statements per level (spilling hash aggregates), 2.8 s for this pass.
 */
export async function stageChainGroups(
  db: Db,
  table: string,
  levels: readonly GroupLevel[],
  from: number,
  cutoff: number,
  concurrency: number,
): Promise<{ groups: number; rows: number }> {
  const len = cutoff - from + 1;
  const series = (
    await db.query<Row>(
      `SELECT r.series_id, r.item_id, r.store_id, i.dept_id, i.category_id, st.region_id
       FROM series r LEFT JOIN items i ON i.item_id = r.item_id LEFT JOIN stores st ON st.store_id = r.store_id`,
    )
  ).rows;
  const maxId = series.reduce((m, r) => Math.max(m, r.series_id), 0);
  const totals: LevelTotals[] = levels.map((level) => {
    const parts = PARTS[level];
    if (!parts) throw new Error(`${level} is not a chain-wide level`);
    const of = new Int32Array(maxId + 1).fill(-1);
    const index = new Map<string, number>();
    const keys: Array<[string, string | null]> = [];
    for (const r of series) {
      const [k1, k2] = parts(r);
      if (k1 === null || (level === 'item_region' && k2 === null)) continue;
      const key = k2 === null ? k1 : `${k1}${KEY_SEP}${k2}`;
      let g = index.get(key);
      if (g === undefined) {
        g = keys.length;
        index.set(key, g);
        keys.push([k1, k2]);
      }
      of[r.series_id] = g;
    }
    return {
      level,
      of,
      keys,
      total: new Float64Array(keys.length * len),
      n: new Int32Array(keys.length * len),
    };
  });

  const stores = [...new Set(series.map((r) => r.store_id))].sort();
  const byStore = new Map<string, number[]>();
  for (const r of series) {
    const ids = byStore.get(r.store_id);
    if (ids) ids.push(r.series_id);
    else byStore.set(r.store_id, [r.series_id]);
  }
  let rows = 0;
  const queue = [...stores];
  await Promise.all(
    Array.from({ length: Math.max(1, Math.min(concurrency, stores.length)) }, async () => {
      for (let store = queue.shift(); store !== undefined; store = queue.shift()) {
        // The checks' blocks when they are current (the runner's checks have just stored them):
        // one value per series and block instead of a row per day. Totals of whole units are
        // exact in float64, so the order they are added in does not matter.
        const own = (byStore.get(store) ?? []).map(
          (id): DenseSeries => ({ seriesId: id, units: new Float64Array(0) }),
        );
        const fromBlocks = await readStoreSalesFromBlocks(db, store, own, from, cutoff);
        if (fromBlocks !== null) {
          for (const t of totals) {
            const { of, total, n } = t;
            for (const x of own) {
              const g = of[x.seriesId]!;
              if (g < 0) continue;
              const u = x.units;
              const at = g * len;
              for (let d = 0; d < len; d++) {
                const v = u[d]!;
                if (!Number.isNaN(v)) {
                  total[at + d]! += v;
                  n[at + d]! += 1;
                }
              }
            }
          }
          rows += fromBlocks;
          continue;
        }
        for await (const b of readCopyBinary(db.copyTo(salesCopySql(store, from, cutoff)), [
          'int4',
          'date',
          'int4',
        ])) {
          const ids = b.columns[0] as Int32Array;
          const days = b.columns[1] as Int32Array;
          const units = b.columns[2] as Int32Array;
          for (const t of totals) {
            const { of, total, n } = t;
            for (let r = 0; r < b.length; r++) {
              const g = of[ids[r]!]!;
              if (g < 0) continue;
              const i = g * len + days[r]! - from;
              total[i]! += units[r]!;
              n[i]! += 1;
            }
          }
          rows += b.length;
        }
      }
    }),
  );

  const t = quoteIdent(table);
  await db.exec(`CREATE UNLOGGED TABLE ${t} (level text NOT NULL, k1 text NOT NULL, k2 text, days bytea NOT NULL);
    ALTER TABLE ${t} ALTER COLUMN days SET STORAGE EXTERNAL;`);
  async function* packed() {
    const w = new RawCopyWriter();
    for (const { level, keys, total, n } of totals) {
      for (let g = 0; g < keys.length; g++) {
        let count = 0;
        for (let d = 0; d < len; d++) if (n[g * len + d]! > 0) count++;
        const buf = Buffer.allocUnsafe(count * 16);
        const dv = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
        let p = 0;
        for (let d = 0; d < len; d++) {
          const i = g * len + d;
          if (n[i]! === 0) continue;
          dv.setInt32(p, d);
          dv.setFloat64(p + 4, total[i]!);
          dv.setInt32(p + 12, n[i]!);
          p += 16;
        }
        const [k1, k2] = keys[g]!;
        w.row([level, k1, k2, buf]);
        yield* w.take();
      }
    }
    yield* w.end();
  }
  // No index: a partition's read filters a few thousand small rows (the packed days live in the
  // TOAST table and are fetched only for the rows that match).
  await db.copyFrom(`COPY ${t} (level, k1, k2, days) FROM STDIN (FORMAT binary)`, packed());
  // This process's own partitions take the totals from memory instead of reading them back.
  const seed = new Map<GroupLevel, Map<string, GroupSeries>>();
  let values = 0;
  for (const { level, keys, total, n } of totals) {
    const byKey = new Map<string, GroupSeries>();
    keys.forEach(([k1, k2], g) => {
      byKey.set(k2 === null ? k1 : `${k1}${KEY_SEP}${k2}`, {
        base: from,
        total: total.slice(g * len, (g + 1) * len),
        n: Float64Array.from(n.subarray(g * len, (g + 1) * len)),
      });
    });
    seed.set(level, byKey);
    values += 2 * keys.length * len;
  }
  await seedStagedGroups(db, table, from, cutoff, seed, values);
  return { groups: totals.reduce((a, x) => a + x.keys.length, 0), rows };
}
