import { type DbSession, quoteIdent } from '../db/database.js';
import type { GroupSeries } from '../features/family.js';
import { type GroupLevel, KEY_SEP, LEVELS } from '../features/group-levels.js';
import { readRawCopy } from './raw-copy.js';
import { dayLiteral, quoteLiteral, textArrayLiteral } from './sql-text.js';

/** Levels in the order they are staged: finer first, so coarser ones sum the finer totals. */
const STAGE_ORDER: readonly GroupLevel[] = [
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
  return STAGE_ORDER.filter((l) => want.has(l));
}

// Key columns of a level when read from raw tables: series r, items i, stores st.
const RAW_KEYS: Record<string, { k1: string; k2: string }> = {
  item_region: { k1: 'r.item_id', k2: 'st.region_id' },
  item: { k1: 'r.item_id', k2: 'NULL::text' },
  region: { k1: 'st.region_id', k2: 'NULL::text' },
  department: { k1: 'i.dept_id', k2: 'NULL::text' },
  category: { k1: 'i.category_id', k2: 'NULL::text' },
  total: { k1: "''::text", k2: 'NULL::text' },
};

/** SQL key of a series at a level, over series r, items i and stores st (as `groupKey`). */
export function levelKeySql(level: GroupLevel): string {
  const sep = `E'\\x1f'`;
  switch (level) {
    case 'store':
      return 'r.store_id';
    case 'store_category':
      return `r.store_id || ${sep} || i.category_id`;
    case 'store_department':
      return `r.store_id || ${sep} || i.dept_id`;
    case 'item_region':
      return `r.item_id || ${sep} || st.region_id`;
    default:
      return RAW_KEYS[level]!.k1;
  }
}

/** How a staged finer level maps to this one's key (g = the finer level's staged rows). */
const DERIVE: Record<string, Record<string, { k1: string; join: string }>> = {
  item: { item_region: { k1: 'g.k1', join: '' } },
  region: { item_region: { k1: 'g.k2', join: '' } },
  department: { item: { k1: 'i.dept_id', join: 'LEFT JOIN items i ON i.item_id = g.k1' } },
  category: { item: { k1: 'i.category_id', join: 'LEFT JOIN items i ON i.item_id = g.k1' } },
  total: { region: { k1: "''::text", join: '' }, category: { k1: "''::text", join: '' } },
};

/**
 * Statements that stage the daily totals of each chain level over days from..cutoff: one GROUP
 * BY per level into `rows` (level, k1, k2, day, total, n), over sales for the finest level and
 * over an already staged finer level for the others; then one row per group in `table` with
 * its days packed as bytes (int4 day offset, float8 total, int4 members; big-endian), so a
 * partition reads a group's history as one value instead of one row per day.
 */
export function stageGroupStatements(
  table: string,
  levels: readonly GroupLevel[],
  from: number,
  cutoff: number,
): string[] {
  const t = quoteIdent(`${table}_r`);
  const out = [
    `CREATE UNLOGGED TABLE ${t} (level text NOT NULL, k1 text, k2 text, day date NOT NULL, total float8 NOT NULL, n int4 NOT NULL)`,
  ];
  const staged: GroupLevel[] = [];
  for (const level of levels) {
    const src = LEVELS[level].from.find((f) => staged.includes(f));
    if (src) {
      const d = DERIVE[level]![src]!;
      out.push(
        `INSERT INTO ${t} SELECT ${quoteLiteral(level)}, ${d.k1}, NULL, g.day, sum(g.total), sum(g.n)::int4 FROM ${t} g ${d.join} WHERE g.level = ${quoteLiteral(src)} GROUP BY 2, g.day`,
      );
    } else {
      const k = RAW_KEYS[level]!;
      out.push(
        `INSERT INTO ${t} SELECT ${quoteLiteral(level)}, ${k.k1}, ${k.k2}, s.day, sum(s.units), count(*)::int4
         FROM sales s JOIN series r ON r.series_id = s.series_id
         LEFT JOIN items i ON i.item_id = r.item_id LEFT JOIN stores st ON st.store_id = r.store_id
         WHERE s.day BETWEEN ${dayLiteral(from)} AND ${dayLiteral(cutoff)} GROUP BY 2, 3, s.day`,
      );
    }
    staged.push(level);
  }
  out.push(
    `CREATE UNLOGGED TABLE ${quoteIdent(table)} AS SELECT level, k1, k2,
       string_agg(int4send((day - ${dayLiteral(from)})::int4) || float8send(total) || int4send(n), ''::bytea ORDER BY day) AS days
     FROM ${t} GROUP BY level, k1, k2`,
    `CREATE INDEX ON ${quoteIdent(table)} (level, k1)`,
    `DROP TABLE ${t}`,
  );
  return out;
}

/** Dense daily totals of groups, keyed by level and group key. */
export type GroupMap = Map<GroupLevel, Map<string, GroupSeries>>;

/**
 * Reads the staged totals of the given groups (keys as in `groupKey`) into dense arrays over
 * days base..cutoff: one COPY per level, filtered to the keys the partition needs.
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
  for (const [level, keys] of wanted) {
    if (keys.size === 0) continue;
    const k1s = new Set([...keys].map((k) => k.split(KEY_SEP)[0]!));
    const sql = `COPY (SELECT k1, k2, days FROM ${quoteIdent(table)} WHERE level = ${quoteLiteral(level)}
      AND k1 = ANY(${textArrayLiteral(k1s)})) TO STDOUT (FORMAT binary)`;
    const byKey = into.get(level) ?? new Map<string, GroupSeries>();
    into.set(level, byKey);
    for await (const [k1, k2, days] of readRawCopy(s.copyTo(sql))) {
      if (!k1 || !days) continue;
      const key =
        k2 === null || k2 === undefined
          ? k1.toString('utf8')
          : `${k1.toString('utf8')}${KEY_SEP}${k2.toString('utf8')}`;
      if (!keys.has(key)) continue;
      const total = new Float64Array(len);
      const n = new Float64Array(len);
      // Offsets count from the staging's first day, which is `base` (the plan's groupFrom).
      for (let p = 0; p + 16 <= days.length; p += 16) {
        const i = days.readInt32BE(p);
        if (i >= 0 && i < len) {
          total[i] = days.readDoubleBE(p + 4);
          n[i] = days.readInt32BE(p + 12);
        }
      }
      byKey.set(key, { base, total, n });
    }
  }
}
