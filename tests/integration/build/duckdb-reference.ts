/**
 * An independent reference for the feature build: DuckDB (@duckdb/node-api) computes every
 * feature of a snapshot with its own SQL window functions (lag, avg / stddev_samp / min / max
 * OVER ROWS BETWEEN, count(DISTINCT) OVER, RANGE frames), GROUP BY for group totals and its own
 * calendar functions (isodow, weekofyear, isoyear), on the raw rows copied out of PostgreSQL.
 */
import { type DuckDBConnection, DuckDBInstance } from '@duckdb/node-api';
import { parseDay } from '../../../src/core/days.js';
import type { DbSession } from '../../../src/db/database.js';
import { defaultGap, type EncodingEntry } from '../../../src/features/encodings.js';
import type { ResolvedFeatureSet } from '../../../src/features/feature-set.js';
import type { GroupLevel } from '../../../src/features/group-levels.js';
import type { HierarchyEntry } from '../../../src/features/hierarchy.js';
import type { WindowEntry } from '../../../src/features/windows.js';
import { calendarFeatures, kindSlug } from '../../../src/features/calendar.js';
import type { PricesParams } from '../../../src/features/prices.js';

export type RefRow = Record<string, number | null>;

/** Opens an in-memory DuckDB with the raw tables of a PostgreSQL schema copied in. */
export async function duckWithChain(pg: DbSession): Promise<DuckDBConnection> {
  const inst = await DuckDBInstance.create(':memory:');
  const con = await inst.connect();
  const copy = async (name: string, ddl: string, select: string, kinds: Array<'int' | 'text' | 'double'>) => {
    await con.run(`CREATE TABLE ${name}_raw (${ddl})`);
    const app = await con.createAppender(`${name}_raw`);
    for (const row of (await pg.query<Record<string, unknown>>(select)).rows) {
      Object.values(row).forEach((v, i) => {
        if (v === null) app.appendNull();
        else if (kinds[i] === 'int') app.appendInteger(Number(v));
        else if (kinds[i] === 'double') app.appendDouble(Number(v));
        else app.appendVarchar(String(v));
      });
      app.endRow();
    }
    app.closeSync();
  };
  const ep = "(day - DATE '1970-01-01')";
  await copy(
    'sales',
    'series_id INTEGER, day INTEGER, units INTEGER',
    `SELECT series_id, ${ep} AS d, units FROM sales`,
    ['int', 'int', 'int'],
  );
  await copy(
    'series',
    'series_id INTEGER, item_id VARCHAR, store_id VARCHAR',
    'SELECT series_id, item_id, store_id FROM series',
    ['int', 'text', 'text'],
  );
  await copy(
    'items',
    'item_id VARCHAR, dept_id VARCHAR, category_id VARCHAR',
    'SELECT item_id, dept_id, category_id FROM items',
    ['text', 'text', 'text'],
  );
  await copy('stores', 'store_id VARCHAR, region_id VARCHAR', 'SELECT store_id, region_id FROM stores', [
    'text',
    'text',
  ]);
  await copy(
    'prices',
    'item_id VARCHAR, store_id VARCHAR, week_start INTEGER, price DOUBLE',
    "SELECT item_id, store_id, week_start - DATE '1970-01-01', price::float8 FROM prices",
    ['text', 'text', 'int', 'double'],
  );
  await copy('events', 'day INTEGER, name VARCHAR, kind VARCHAR', `SELECT ${ep}, name, kind FROM events`, [
    'int',
    'text',
    'text',
  ]);
  await copy('benefit_days', 'region_id VARCHAR, day INTEGER', `SELECT region_id, ${ep} FROM benefit_days`, [
    'text',
    'int',
  ]);
  const asDate = (c: string) => `DATE '1970-01-01' + ${c} AS ${c}`;
  await con.run(`
    CREATE TABLE sales AS SELECT series_id, ${asDate('day')}, units FROM sales_raw;
    CREATE TABLE series AS SELECT * FROM series_raw;
    CREATE TABLE items AS SELECT * FROM items_raw;
    CREATE TABLE stores AS SELECT * FROM stores_raw;
    CREATE TABLE prices AS SELECT item_id, store_id, ${asDate('week_start')}, price FROM prices_raw;
    CREATE TABLE events AS SELECT ${asDate('day')}, name, kind FROM events_raw;
    CREATE TABLE benefit_days AS SELECT region_id, ${asDate('day')} FROM benefit_days_raw;
  `);
  return con;
}

const d = (epoch: number) => `(DATE '1970-01-01' + ${epoch})`;
const SEP = 'chr(31)';

/** DuckDB key expression of a level over series r, items i, stores st (as src/features/group-levels.ts). */
function levelKey(level: GroupLevel): string {
  switch (level) {
    case 'total':
      return "''";
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
      return `r.store_id || ${SEP} || i.category_id`;
    case 'store_department':
      return `r.store_id || ${SEP} || i.dept_id`;
    case 'item_region':
      return `r.item_id || ${SEP} || st.region_id`;
  }
}
const PARENT: Record<string, GroupLevel> = {
  region: 'total',
  store: 'region',
  category: 'total',
  department: 'category',
  item: 'department',
  store_category: 'store',
  store_department: 'store_category',
  item_region: 'item',
};

async function rows(con: DuckDBConnection, sql: string): Promise<Record<string, unknown>[]> {
  return (await con.runAndReadAll(sql)).getRowObjectsJS() as Record<string, unknown>[];
}

/**
 * Computes every feature of `set` for the snapshot's keys with DuckDB. `keys` come from the
 * snapshot table (series_id, day, origin as epoch days); returns rows keyed "series|origin|day".
 */
export async function referenceFeatures(
  con: DuckDBConnection,
  set: ResolvedFeatureSet,
  cutoff: number,
  keys: ReadonlyArray<{ series_id: number; day: number; origin: number | null }>,
  weekStart = 6,
): Promise<Map<string, RefRow>> {
  const H = set.shape.horizon;
  const C = cutoff;
  const PB = C + (set.definition.pricesKnownAhead ? H : 0);
  await con.run('DROP TABLE IF EXISTS keys_raw; DROP TABLE IF EXISTS keys; DROP TABLE IF EXISTS dense');
  await con.run('CREATE TABLE keys_raw (series_id INTEGER, day INTEGER, origin INTEGER)');
  const app = await con.createAppender('keys_raw');
  for (const k of keys) {
    app.appendInteger(k.series_id);
    app.appendInteger(k.day);
    if (k.origin === null) app.appendNull();
    else app.appendInteger(k.origin);
    app.endRow();
  }
  app.closeSync();
  // anchor: the day sales features are measured from (t, or o + 1 in origin mode).
  await con.run(`CREATE TABLE keys AS SELECT series_id, DATE '1970-01-01' + day AS day,
      CASE WHEN origin IS NULL THEN NULL ELSE DATE '1970-01-01' + origin END AS origin,
      DATE '1970-01-01' + coalesce(origin + 1, day) AS anchor FROM keys_raw`);
  // A dense daily grid per series (units NULL without a row or past the cutoff).
  await con.run(`CREATE TABLE dense AS
    SELECT r.series_id, g.day::DATE AS day, s.units
    FROM series r
    CROSS JOIN (SELECT range AS day FROM range((SELECT min(day) FROM sales)::TIMESTAMP, ${d(C + H + 2)}::TIMESTAMP, INTERVAL 1 DAY)) g
    LEFT JOIN sales s ON s.series_id = r.series_id AND s.day = g.day::DATE AND s.day <= ${d(C)}`);

  const selects: string[] = [];
  const joins: string[] = [];
  let alias = 0;
  const def = set.definition.families;

  // Lags and windows: window functions over the dense grid, read at the anchor day.
  const w: string[] = [];
  for (const k of def.lags?.days ?? []) w.push(`lag(units, ${k}) OVER s AS lag_${k}`);
  for (const e of (def.windows ?? []) as readonly WindowEntry[]) {
    const frame = `PARTITION BY series_id ORDER BY day ROWS BETWEEN ${e.shift + e.size - 1} PRECEDING AND ${e.shift} PRECEDING`;
    const min = e.minDays ?? 1;
    const guard = (x: string) => `CASE WHEN count(units) OVER (${frame}) >= ${min} THEN ${x} END`;
    for (const st of e.stats) {
      const name = `${st}_${e.size}d_s${e.shift}`;
      if (st === 'mean') w.push(`${guard(`avg(units) OVER (${frame})`)} AS ${name}`);
      if (st === 'std') w.push(`${guard(`stddev_samp(units) OVER (${frame})`)} AS ${name}`);
      if (st === 'min') w.push(`${guard(`min(units) OVER (${frame})`)} AS ${name}`);
      if (st === 'max') w.push(`${guard(`max(units) OVER (${frame})`)} AS ${name}`);
      if (st === 'zero_share')
        w.push(
          `${guard(`avg(CASE WHEN units = 0 THEN 1.0 WHEN units IS NOT NULL THEN 0.0 END) OVER (${frame})`)} AS ${name}`,
        );
    }
  }
  if (w.length) {
    const a = `w${alias++}`;
    joins.push(
      `LEFT JOIN (SELECT series_id, day, ${w.join(', ')} FROM dense WINDOW s AS (PARTITION BY series_id ORDER BY day)) ${a} ON ${a}.series_id = k.series_id AND ${a}.day = k.anchor`,
    );
    for (const x of w) selects.push(`${a}.${x.split(' AS ').pop()}`);
  }
  // The weighted mean: a self-join over the window's days with weights (1 - alpha)^age.
  for (const e of (def.windows ?? []) as readonly WindowEntry[]) {
    if (!e.stats.includes('ewm')) continue;
    const lam = 1 - (e.alpha ?? 2 / (e.size + 1));
    const a = `e${alias++}`;
    const name = `ewm_${e.size}d_s${e.shift}`;
    joins.push(`LEFT JOIN (
      SELECT k2.series_id, k2.anchor,
        CASE WHEN count(x.units) >= ${e.minDays ?? 1} THEN
          sum(x.units * pow(${lam}, date_diff('day', x.day, k2.anchor - ${e.shift}))) /
          sum(CASE WHEN x.units IS NOT NULL THEN pow(${lam}, date_diff('day', x.day, k2.anchor - ${e.shift})) END) END AS ${name}
      FROM (SELECT DISTINCT series_id, anchor FROM keys) k2
      JOIN dense x ON x.series_id = k2.series_id AND x.day BETWEEN k2.anchor - ${e.shift + e.size - 1} AND k2.anchor - ${e.shift}
      GROUP BY 1, 2) ${a} ON ${a}.series_id = k.series_id AND ${a}.anchor = k.anchor`);
    selects.push(`${a}.${name}`);
  }

  // Calendar of the target day.
  if (def.calendar) {
    const wanted = calendarFeatures(def.calendar, set.shape.mode);
    await con.run(`CREATE OR REPLACE TABLE codes_name AS SELECT name, row_number() OVER (ORDER BY name) AS code FROM (SELECT DISTINCT name FROM events);
      CREATE OR REPLACE TABLE codes_kind AS SELECT kind, row_number() OVER (ORDER BY kind) AS code FROM (SELECT DISTINCT kind FROM events);
      CREATE OR REPLACE TABLE day_events AS SELECT e.day, arg_min(e.name, e.name) AS first_name, count(*) AS n FROM events e GROUP BY e.day`);
    const cal: Record<string, string> = {
      day_of_week: 'isodow(k.day)',
      day_of_month: 'dayofmonth(k.day)',
      iso_week: 'weekofyear(k.day)',
      iso_year: 'isoyear(k.day)',
      month: 'month(k.day)',
      quarter: 'quarter(k.day)',
      year: 'year(k.day)',
      is_weekend: 'CASE WHEN isodow(k.day) >= 6 THEN 1 ELSE 0 END',
      event_name: `coalesce((SELECT c.code FROM day_events de JOIN codes_name c ON c.name = de.first_name WHERE de.day = k.day), 0)`,
      event_kind: `coalesce((SELECT ck.code FROM day_events de JOIN events e ON e.day = de.day AND e.name = de.first_name JOIN codes_kind ck ON ck.kind = e.kind WHERE de.day = k.day), 0)`,
      event_count: 'coalesce((SELECT de.n FROM day_events de WHERE de.day = k.day), 0)',
      benefit_day: `CASE WHEN EXISTS (SELECT 1 FROM benefit_days b JOIN series r ON r.series_id = k.series_id JOIN stores st ON st.store_id = r.store_id WHERE b.region_id = st.region_id AND b.day = k.day) THEN 1 ELSE 0 END`,
      days_ahead: "date_diff('day', k.origin, k.day)",
    };
    for (const f of wanted) selects.push(`${cal[f]} AS ${f}`);
    for (const kind of def.calendar.eventKinds) {
      const q = kind.replaceAll("'", "''");
      selects.push(
        `date_diff('day', k.day, (SELECT min(e.day) FROM events e WHERE e.kind = '${q}' AND e.day >= k.day)) AS days_to_${kindSlug(kind)}`,
      );
      selects.push(
        `date_diff('day', (SELECT max(e.day) FROM events e WHERE e.kind = '${q}' AND e.day <= k.day), k.day) AS days_since_${kindSlug(kind)}`,
      );
    }
  }

  // Prices: per price row stats with window functions, joined on the target day's week.
  if (def.prices) {
    const p = def.prices as PricesParams;
    await con.run(`CREATE OR REPLACE TABLE price_rows AS
      SELECT p.item_id, p.store_id, p.week_start, p.price,
        max(p.price) OVER x AS price_max, min(p.price) OVER x AS price_min, avg(p.price) OVER x AS price_mean,
        stddev_samp(p.price) OVER x AS price_std, p.price / max(p.price) OVER x AS price_rel_max,
        count(DISTINCT p.price) OVER x AS price_distinct,
        p.price / CASE WHEN lag(p.week_start) OVER o = p.week_start - 7 THEN lag(p.price) OVER o END AS price_momentum_1w,
        p.price / avg(p.price) OVER (PARTITION BY p.item_id, p.store_id ORDER BY p.week_start RANGE BETWEEN INTERVAL 21 DAY PRECEDING AND CURRENT ROW) AS price_momentum_4w,
        p.price / avg(p.price) OVER (PARTITION BY p.item_id, p.store_id ORDER BY p.week_start RANGE BETWEEN INTERVAL 357 DAY PRECEDING AND CURRENT ROW) AS price_momentum_52w,
        CASE WHEN i.dept_id IS NOT NULL THEN count(*) OVER (PARTITION BY p.store_id, i.dept_id, p.week_start, p.price) END AS dept_same_price,
        CASE WHEN i.dept_id IS NOT NULL THEN p.price / avg(p.price) OVER (PARTITION BY p.store_id, i.dept_id, p.week_start) END AS price_rel_dept
      FROM prices p LEFT JOIN items i ON i.item_id = p.item_id
      WHERE p.week_start <= ${d(PB)}
      WINDOW x AS (PARTITION BY p.item_id, p.store_id ORDER BY p.week_start ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW),
             o AS (PARTITION BY p.item_id, p.store_id ORDER BY p.week_start)`);
    const a = `p${alias++}`;
    // The week of t starts on the last weekStart-day on or before t; past the price boundary the
    // last known week is used.
    const ws = `(k.day - CAST((dayofweek(k.day) - ${weekStart} + 7) % 7 AS INTEGER))`;
    joins.push(`LEFT JOIN series rp ON rp.series_id = k.series_id
      LEFT JOIN price_rows ${a} ON ${a}.item_id = rp.item_id AND ${a}.store_id = rp.store_id AND ${a}.week_start =
        CASE WHEN ${ws} <= ${d(PB)} THEN ${ws}
             ELSE (SELECT max(q.week_start) FROM price_rows q WHERE q.item_id = rp.item_id AND q.store_id = rp.store_id) END`);
    for (const f of p.features) selects.push(`${a}.${f}`);
  }

  // Group totals per level and day (GROUP BY), on a dense grid per group key.
  const groupLevels = new Set<GroupLevel>();
  for (const e of (def.encodings ?? []) as readonly EncodingEntry[])
    for (const g of e.groups) {
      groupLevels.add(g);
      groupLevels.add(PARENT[g]!);
    }
  for (const h of (def.hierarchy ?? []) as readonly HierarchyEntry[])
    for (const l of h.levels) groupLevels.add(l);
  for (const level of groupLevels) {
    await con.run(`CREATE OR REPLACE TABLE g_${level} AS
      WITH t AS (
        SELECT ${levelKey(level)} AS gkey, s.day, sum(s.units) AS total, count(*) AS n
        FROM sales s JOIN series r ON r.series_id = s.series_id LEFT JOIN items i ON i.item_id = r.item_id
        LEFT JOIN stores st ON st.store_id = r.store_id WHERE s.day <= ${d(C)} GROUP BY 1, 2)
      SELECT kk.gkey, g.day::DATE AS day, coalesce(t.total, 0) AS total, coalesce(t.n, 0) AS n
      FROM (SELECT DISTINCT gkey FROM t WHERE gkey IS NOT NULL) kk
      CROSS JOIN (SELECT range AS day FROM range((SELECT min(day) FROM sales)::TIMESTAMP, ${d(C + H + 2)}::TIMESTAMP, INTERVAL 1 DAY)) g
      LEFT JOIN t ON t.gkey = kk.gkey AND t.day = g.day::DATE`);
    await con.run(`CREATE OR REPLACE TABLE sk_${level} AS
      SELECT r.series_id, ${levelKey(level)} AS gkey FROM series r LEFT JOIN items i ON i.item_id = r.item_id LEFT JOIN stores st ON st.store_id = r.store_id`);
  }
  for (const e of (def.encodings ?? []) as readonly EncodingEntry[]) {
    const g = e.shift ?? defaultGap(set.shape);
    const frame = `PARTITION BY gkey ORDER BY day ROWS BETWEEN ${g + e.window - 1} PRECEDING AND ${g} PRECEDING`;
    for (const grp of e.groups) {
      const par = PARENT[grp]!;
      const a = `n${alias++}`;
      const sums = (lv: string) =>
        `(SELECT gkey, day, sum(total) OVER (${frame}) AS s, sum(n) OVER (${frame}) AS c FROM g_${lv})`;
      joins.push(`LEFT JOIN (
        SELECT kx.series_id, kx.anchor,
          CASE WHEN coalesce(pp.c, 0) > 0 THEN (coalesce(gg.s, 0) + ${e.m} * (pp.s / pp.c)) / (coalesce(gg.c, 0) + ${e.m}) END AS v
        FROM (SELECT DISTINCT series_id, anchor FROM keys) kx
        JOIN sk_${grp} a ON a.series_id = kx.series_id JOIN sk_${par} b ON b.series_id = kx.series_id
        LEFT JOIN ${sums(grp)} gg ON gg.gkey = a.gkey AND gg.day = kx.anchor
        LEFT JOIN ${sums(par)} pp ON pp.gkey = b.gkey AND pp.day = kx.anchor
        WHERE a.gkey IS NOT NULL AND b.gkey IS NOT NULL) ${a} ON ${a}.series_id = k.series_id AND ${a}.anchor = k.anchor`);
      selects.push(`${a}.v AS enc_${grp}_${e.window}d_s${g}`);
    }
  }
  for (const h of (def.hierarchy ?? []) as readonly HierarchyEntry[]) {
    const g = h.shift ?? defaultGap(set.shape);
    const frame = `PARTITION BY gkey ORDER BY day ROWS BETWEEN ${g + h.size - 1} PRECEDING AND ${g} PRECEDING`;
    for (const level of h.levels) {
      const a = `h${alias++}`;
      const v = 'CASE WHEN n > 0 THEN total END';
      const guard = (x: string) => `CASE WHEN count(${v}) OVER (${frame}) >= ${h.minDays ?? 1} THEN ${x} END`;
      const agg: Record<string, string> = {
        mean: guard(`avg(${v}) OVER (${frame})`),
        std: guard(`stddev_samp(${v}) OVER (${frame})`),
        min: guard(`min(${v}) OVER (${frame})`),
        max: guard(`max(${v}) OVER (${frame})`),
        zero_share: guard(
          `avg(CASE WHEN n > 0 AND total = 0 THEN 1.0 WHEN n > 0 THEN 0.0 END) OVER (${frame})`,
        ),
      };
      const stats = h.stats.filter((s) => s !== 'ewm');
      joins.push(`LEFT JOIN (SELECT sk.series_id, x.day, ${stats.map((s) => `x.${s}`).join(', ')}
        FROM sk_${level} sk JOIN (SELECT gkey, day, ${stats.map((s) => `${agg[s]} AS ${s}`).join(', ')} FROM g_${level}) x ON x.gkey = sk.gkey
        ) ${a} ON ${a}.series_id = k.series_id AND ${a}.day = k.anchor`);
      for (const s of stats) selects.push(`${a}.${s} AS ${level}_${s}_${h.size}d_s${g}`);
    }
  }

  const sql = `SELECT k.series_id, (k.day - DATE '1970-01-01')::INTEGER AS kday,
      CASE WHEN k.origin IS NULL THEN NULL ELSE (k.origin - DATE '1970-01-01')::INTEGER END AS korigin,
      ${selects.join(',\n      ')}
    FROM keys k ${joins.join('\n    ')}`;
  const out = new Map<string, RefRow>();
  for (const r of await rows(con, sql)) {
    const row: RefRow = {};
    for (const [k, v] of Object.entries(r)) row[k] = v === null ? null : Number(v);
    out.set(`${r.series_id}|${r.korigin ?? ''}|${r.kday}`, row);
  }
  return out;
}

/** Epoch day of an ISO day string (test convenience). */
export const ep = (s: string) => parseDay(s)!;
