import { type DbSession, quoteIdent } from '../db/database.js';
import type { GroupSeries } from '../features/family.js';
import { type GroupLevel, KEY_SEP, LEVELS } from '../features/group-levels.js';
import { readRawCopy } from './raw-copy.js';
import { quoteLiteral, textArrayLiteral } from './sql-text.js';

const CHAIN_ORDER: readonly GroupLevel[] = [
  'item_region',
  'item',
  'region',
  'department',
  'category',
  'total',
];

/** Chain-wide levels a set needs staged (store levels are summed inside each partition). */
export function chainLevels(levels: Iterable<GroupLevel>): GroupLevel[] {
  const want = new Set([...levels].filter((l) => LEVELS[l].scope === 'chain'));
  return CHAIN_ORDER.filter((l) => want.has(l));
}

/** SQL key of a series at a level, over series r, items i and stores st (as `groupKey`). */
export function levelKeySql(level: GroupLevel): string {
  const sep = `E'\\x1f'`;
  switch (level) {
    case 'total':
      return "''::text";
    case 'region':
      return 'st.region_id';
    case 'store':
      return 'r.store_id';
    case 'category':
      return 'i.category_id';
    case 'department':
      return 'i.dept_id';
    case 'item':
      return 'r.item_id';
    case 'store_category':
      return `r.store_id || ${sep} || i.category_id`;
    case 'store_department':
      return `r.store_id || ${sep} || i.dept_id`;
    case 'item_region':
      return `r.item_id || ${sep} || st.region_id`;
  }
}

/** Dense daily totals of groups, keyed by level and group key. */
export type GroupMap = Map<GroupLevel, Map<string, GroupSeries>>;

/**
 * What this process has read of one staged table: a worker computes partition after partition of
 * the same plan, and chain-wide groups (an item over every store) are wanted by every partition, so
 * each key is read once per process instead of once per partition. Keyed by the table's OID as
 * well as its name and window: a table dropped and planned again under the same name is not the
 * one cached. Only the newest table is kept; a cache past MAX_CACHED_VALUES is not grown.
 */
interface StagedCache {
  readonly id: string;
  /** null: the table holds no such key. */
  readonly groups: Map<GroupLevel, Map<string, GroupSeries | null>>;
  values: number;
}
let staged: StagedCache | null = null;
const MAX_CACHED_VALUES = 32_000_000; // about 512 MB of totals and counts

/** The table's OID (null: no such table): a table dropped and made again under its name gets another. */
async function tableOid(s: DbSession, table: string): Promise<string | null> {
  const r = await s.query<{ oid: string | null }>('SELECT to_regclass($1)::oid::text AS oid', [table]);
  return r.rows[0]?.oid ?? null;
}

/**
 * Keeps in this process's cache the totals it has just staged into `table` over days
 * base..cutoff (chain-groups.ts), as `readStagedGroups` would read them back: the planner's own
 * claim loop then reads nothing back. `values` counts the totals and counts held.
 */
export async function seedStagedGroups(
  s: DbSession,
  table: string,
  base: number,
  cutoff: number,
  groups: ReadonlyMap<GroupLevel, ReadonlyMap<string, GroupSeries>>,
  values: number,
): Promise<void> {
  if (values > MAX_CACHED_VALUES) return;
  const oid = await tableOid(s, table);
  if (!oid) return;
  staged = {
    id: `${oid}:${table}:${base}:${cutoff}`,
    groups: new Map([...groups].map(([level, byKey]) => [level, new Map(byKey)])),
    values,
  };
}

/**
 * Reads the staged totals of the given groups (keys as in `groupKey`) into dense arrays over
 * days base..cutoff: one COPY per level, filtered to the keys the partition needs and this
 * process has not read yet for the same table (the arrays are shared and must not be written).
 */
export async function readStagedGroups(
  s: DbSession,
  table: string,
  wanted: ReadonlyMap<GroupLevel, ReadonlySet<string>>,
  base: number,
  cutoff: number,
  into: GroupMap,
): Promise<void> {
  const len = cutoff - base + 1;
  const oid = await tableOid(s, table);
  const id = `${oid}:${table}:${base}:${cutoff}`;
  if (staged?.id !== id) staged = oid ? { id, groups: new Map(), values: 0 } : null;
  const cache = staged;
  for (const [level, keys] of wanted) {
    if (keys.size === 0) continue;
    const byKey = into.get(level) ?? new Map<string, GroupSeries>();
    into.set(level, byKey);
    const known = cache?.groups.get(level);
    const missing = new Set<string>();
    for (const k of keys) {
      const g = known?.get(k);
      if (g) byKey.set(k, g);
      else if (g === undefined) missing.add(k);
    }
    if (missing.size === 0) continue;
    const keep = cache !== null && cache.values + missing.size * 2 * len <= MAX_CACHED_VALUES;
    let cached = known;
    if (keep && !cached) {
      cached = new Map();
      cache!.groups.set(level, cached);
    }
    const k1s = new Set([...missing].map((k) => k.split(KEY_SEP)[0]!));
    const sql = `COPY (SELECT k1, k2, days FROM ${quoteIdent(table)} WHERE level = ${quoteLiteral(level)}
      AND k1 = ANY(${textArrayLiteral(k1s)})) TO STDOUT (FORMAT binary)`;
    for await (const [k1, k2, days] of readRawCopy(s.copyTo(sql))) {
      if (!k1 || !days) continue;
      const key =
        k2 === null || k2 === undefined
          ? k1.toString('utf8')
          : `${k1.toString('utf8')}${KEY_SEP}${k2.toString('utf8')}`;
      if (!missing.has(key)) continue;
      const total = new Float64Array(len);
      const n = new Float64Array(len);
      // Offsets count from the staging's first day, which is `base` (the plan's groupFrom).
      const dv = new DataView(days.buffer, days.byteOffset, days.byteLength);
      for (let p = 0; p + 16 <= days.length; p += 16) {
        const i = dv.getInt32(p);
        if (i >= 0 && i < len) {
          total[i] = dv.getFloat64(p + 4);
          n[i] = dv.getInt32(p + 12);
        }
      }
      const g = { base, total, n };
      byKey.set(key, g);
      if (keep) cached!.set(key, g);
    }
    if (keep) {
      // A key the table does not hold is remembered as absent, so it is not asked for again.
      for (const k of missing) if (!cached!.has(k)) cached!.set(k, null);
      cache!.values += missing.size * 2 * len;
    }
  }
}
