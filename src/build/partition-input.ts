import { formatDay, parseDay } from '../core/days.js';
import { readCopyBinary } from '../db/binary-copy.js';
import type { DbSession } from '../db/database.js';
import type { CalendarEvent } from '../features/calendar.js';
import type { GroupSeries, ItemPrices } from '../features/family.js';
import { type GroupLevel, groupKeys, type SeriesHierarchy } from '../features/group-levels.js';
import { priceTicks } from '../features/prices.js';
import type { SalesChecksum } from './fingerprint.js';
import { dayLiteral, quoteLiteral } from './sql-text.js';

/** One series of a partition: its hierarchy and dense daily units from the partition's base. */
export interface PartitionSeries {
  readonly seriesId: number;
  readonly hierarchy: SeriesHierarchy;
  readonly keys: Record<GroupLevel, string | null>;
  readonly firstDay: number;
  units: Float64Array;
}

/**
 * The store's series that exist as of the cutoff (a sales row on or before it), in series
 * order. A series first sold after the cutoff is unknown to a build as of that cutoff. Each
 * series' first day comes from `firstDays` when given (`readStoreFirstDays`: from the checks'
 * copy, which the caller has checked is current), else from an index probe per series.
 */
export async function readPartitionSeries(
  s: DbSession,
  store: string,
  cutoff: number,
  firstDays?: ReadonlyMap<number, number>,
): Promise<PartitionSeries[]> {
  const rows = (
    await s.query<{
      series_id: number;
      item_id: string;
      store_id: string;
      dept_id: string | null;
      category_id: string | null;
      region_id: string | null;
      first_day: string | null;
    }>(
      `SELECT r.series_id, r.item_id, r.store_id, i.dept_id, i.category_id, st.region_id,
         ${firstDays ? 'NULL' : 'f.first_day'} AS first_day
       FROM series r
       LEFT JOIN items i ON i.item_id = r.item_id
       LEFT JOIN stores st ON st.store_id = r.store_id
       ${firstDays ? '' : 'CROSS JOIN LATERAL (SELECT min(day) AS first_day FROM sales x WHERE x.series_id = r.series_id) f'}
       WHERE r.store_id = $1${firstDays ? '' : ' AND f.first_day <= $2'}
       ORDER BY r.series_id`,
      firstDays ? [store] : [store, formatDay(cutoff)],
    )
  ).rows;
  const out: PartitionSeries[] = [];
  for (const r of rows) {
    const firstDay = firstDays ? firstDays.get(r.series_id) : parseDay(r.first_day!)!;
    if (firstDay === undefined || firstDay > cutoff) continue;
    const hierarchy: SeriesHierarchy = {
      itemId: r.item_id,
      storeId: r.store_id,
      deptId: r.dept_id,
      categoryId: r.category_id,
      regionId: r.region_id,
    };
    out.push({
      seriesId: r.series_id,
      hierarchy,
      keys: groupKeys(hierarchy),
      firstDay,
      units: new Float64Array(0),
    });
  }
  return out;
}

/**
 * The COPY of one store's sales for days from..cutoff (all days when `from` is null). A lateral
 * index range scan per series (OFFSET 0 keeps the planner from flattening it into a join), so a
 * store reads its own rows and never scans the whole table, which a plain join led the planner
 * to do once per partition, plus a sort. Rows come grouped by series; the reader places them by
 * day, so no sort is needed.
 */
export function salesCopySql(store: string, from: number | null, cutoff: number): string {
  return `COPY (SELECT x.series_id, x.day, x.units
      FROM (SELECT series_id FROM series WHERE store_id = ${quoteLiteral(store)}) r
      CROSS JOIN LATERAL (SELECT s.series_id, s.day, s.units FROM sales s WHERE s.series_id = r.series_id
        ${from === null ? '' : `AND s.day >= ${dayLiteral(from)}`} AND s.day <= ${dayLiteral(cutoff)} OFFSET 0) x) TO STDOUT (FORMAT binary)`;
}

/**
 * Reads the store's sales for days base..cutoff with one binary COPY and fills
 * each series' dense `units` (NaN where there is no row); every row read goes into `checksum`.
 */
export async function readPartitionSales(
  s: DbSession,
  store: string,
  series: readonly PartitionSeries[],
  base: number,
  cutoff: number,
  checksum?: SalesChecksum,
): Promise<number> {
  const len = cutoff - base + 1;
  const index = new Map<number, PartitionSeries>();
  for (const x of series) {
    x.units = new Float64Array(len).fill(Number.NaN);
    index.set(x.seriesId, x);
  }
  const sql = salesCopySql(store, base, cutoff);
  let rows = 0;
  let cur: PartitionSeries | undefined;
  let curId = -1;
  for await (const b of readCopyBinary(s.copyTo(sql), ['int4', 'date', 'int4'])) {
    const ids = b.columns[0] as Int32Array;
    const days = b.columns[1] as Int32Array;
    const units = b.columns[2] as Int32Array;
    for (let r = 0; r < b.length; r++) {
      const id = ids[r]!;
      if (id !== curId) {
        curId = id;
        cur = index.get(id);
      }
      if (cur) cur.units[days[r]! - base] = units[r]!;
    }
    checksum?.add(ids, days, units, b.length);
    rows += b.length;
  }
  return rows;
}

/** Daily totals of the store-level groups, summed from the partition's own series. */
export function storeGroups(
  series: readonly PartitionSeries[],
  levels: readonly GroupLevel[],
  salesBase: number,
  groupBase: number,
  cutoff: number,
): Map<GroupLevel, Map<string, GroupSeries>> {
  const out = new Map<GroupLevel, Map<string, GroupSeries>>();
  addGroupTotals(out, series, levels, salesBase, groupBase, cutoff);
  return out;
}

/**
 * Adds the units of `series` (dense from `salesBase`) to the daily totals of their groups at
 * `levels` over days groupBase..cutoff: store levels from one partition, or chain levels from
 * every partition of an in-process build in turn. The totals are sums of integers in float64,
 * exact below 2^53, so the order series are added in does not change them.
 */
export function addGroupTotals(
  into: Map<GroupLevel, Map<string, GroupSeries>>,
  series: readonly PartitionSeries[],
  levels: readonly GroupLevel[],
  salesBase: number,
  groupBase: number,
  cutoff: number,
): void {
  const len = cutoff - groupBase + 1;
  for (const level of levels) {
    let byKey = into.get(level);
    if (!byKey) {
      byKey = new Map<string, GroupSeries>();
      into.set(level, byKey);
    }
    for (const x of series) {
      const key = x.keys[level];
      if (key === null) continue;
      let g = byKey.get(key);
      if (!g) {
        g = { base: groupBase, total: new Float64Array(len), n: new Float64Array(len) };
        byKey.set(key, g);
      }
      const total = g.total as Float64Array;
      const n = g.n as Float64Array;
      const off = groupBase - salesBase;
      for (let i = 0; i < len; i++) {
        const v = x.units[i + off];
        if (v === undefined || Number.isNaN(v)) continue;
        total[i]! += v;
        n[i]! += 1;
      }
    }
  }
}

/**
 * Weekly prices of the store's items (those with a series in the store) up to the price
 * boundary, plus per department and week the count of items at each price (in ten-thousandths).
 */
export async function readPartitionPrices(
  s: DbSession,
  store: string,
  priceBoundary: number,
  departmentOf: ReadonlyMap<string, string | null>,
): Promise<StorePrices> {
  // Per item of the store's series, a range scan of the prices key (item_id, store_id, week_start):
  // the key does not lead with the store, so filtering on it alone would scan every price. Rows
  // carry the series id rather than the item's text id (one item per series in a store), so
  // the reader decodes no string per row.
  const st = quoteLiteral(store);
  const itemOf = new Map(
    (
      await s.query<{ series_id: number; item_id: string }>(
        'SELECT series_id, item_id FROM series WHERE store_id = $1',
        [store],
      )
    ).rows.map((r) => [r.series_id, r.item_id]),
  );
  const sql = `COPY (SELECT x.series_id, x.week_start, x.price FROM (SELECT series_id, item_id FROM series WHERE store_id = ${st} ORDER BY item_id) r
      CROSS JOIN LATERAL (SELECT r.series_id, p.week_start, p.price::float8 AS price FROM prices p
        WHERE p.item_id = r.item_id AND p.store_id = ${st} AND p.week_start <= ${dayLiteral(priceBoundary)}
        ORDER BY p.week_start OFFSET 0) x) TO STDOUT (FORMAT binary)`;
  const out: StorePrices = { prices: new Map(), deptPrices: new Map() };
  let curId = -1;
  let weeks = new Int32Array(64);
  let values = new Float64Array(64);
  let n = 0;
  const flush = () => {
    if (curId >= 0) {
      const item = itemOf.get(curId)!;
      addItemPrices(out, item, departmentOf.get(item), weeks.slice(0, n), values.slice(0, n));
    }
    n = 0;
  };
  for await (const b of readCopyBinary(s.copyTo(sql), ['int4', 'date', 'float8'])) {
    const ids = b.columns[0] as Int32Array;
    const wk = b.columns[1] as Int32Array;
    const pr = b.columns[2] as Float64Array;
    for (let r = 0; r < b.length; r++) {
      if (ids[r] !== curId) {
        flush();
        curId = ids[r]!;
      }
      if (n === weeks.length) {
        const w2 = new Int32Array(2 * n);
        w2.set(weeks);
        weeks = w2;
        const v2 = new Float64Array(2 * n);
        v2.set(values);
        values = v2;
      }
      weeks[n] = wk[r]!;
      values[n++] = pr[r]!;
    }
  }
  flush();
  return out;
}

/** One store's prices as the price features read them. */
export interface StorePrices {
  readonly prices: Map<string, ItemPrices>;
  /** Per department and week: price in ten-thousandths -> number of the store's items at it. */
  readonly deptPrices: Map<string, Map<number, Map<number, number>>>;
}

/**
 * Adds one item's price rows (weeks ascending) to its store's maps. Items are added in item
 * order (the database's), so every map is filled in the same order whichever reader called.
 */
export function addItemPrices(
  out: StorePrices,
  item: string,
  dept: string | null | undefined,
  weeks: Int32Array,
  values: Float64Array,
): void {
  let byWeek: Map<number, Map<number, number>> | null = null;
  if (dept !== undefined && dept !== null) {
    byWeek = out.deptPrices.get(dept) ?? null;
    if (!byWeek) {
      byWeek = new Map();
      out.deptPrices.set(dept, byWeek);
    }
    for (let i = 0; i < weeks.length; i++) {
      let counts = byWeek.get(weeks[i]!);
      if (!counts) {
        counts = new Map();
        byWeek.set(weeks[i]!, counts);
      }
      const tick = priceTicks(values[i]!);
      counts.set(tick, (counts.get(tick) ?? 0) + 1);
    }
  }
  out.prices.set(item, { weeks, prices: values });
}

/**
 * Every store's prices (of the items it has series of) up to the price boundary, as
 * `readPartitionPrices` gives them store by store: one scan of the prices table instead of a
 * range scan per item and store, whose rows lie one to a page when prices arrive week by week
 * (measured on 57M sales rows: 2-2.9 s a store, 10 stores). Rows are grouped by series in Node
 * (a counting sort on the series id) and each series' weeks put in order.
 */
export async function readChainPrices(
  s: DbSession,
  priceBoundary: number,
  departmentOf: ReadonlyMap<string, string | null>,
): Promise<Map<string, StorePrices>> {
  const series = (
    await s.query<{ store_id: string; series_id: number; item_id: string }>(
      'SELECT store_id, series_id, item_id FROM series ORDER BY store_id, item_id',
    )
  ).rows;
  const maxId = series.reduce((m, r) => Math.max(m, r.series_id), 0);
  const batches: Array<{ ids: Int32Array; weeks: Int32Array; values: Float64Array }> = [];
  const count = new Int32Array(maxId + 2);
  let total = 0;
  const sql = `COPY (SELECT r.series_id, p.week_start, p.price::float8 AS price FROM prices p
      JOIN series r ON r.item_id = p.item_id AND r.store_id = p.store_id
      WHERE p.week_start <= ${dayLiteral(priceBoundary)}) TO STDOUT (FORMAT binary)`;
  for await (const b of readCopyBinary(s.copyTo(sql), ['int4', 'date', 'float8'])) {
    const ids = (b.columns[0] as Int32Array).subarray(0, b.length);
    for (let r = 0; r < b.length; r++) count[ids[r]! + 1]!++;
    batches.push({
      ids,
      weeks: (b.columns[1] as Int32Array).subarray(0, b.length),
      values: (b.columns[2] as Float64Array).subarray(0, b.length),
    });
    total += b.length;
  }
  // start[id] .. start[id + 1] holds the rows of series id.
  const start = count;
  for (let i = 1; i < start.length; i++) start[i]! += start[i - 1]!;
  const at = start.slice();
  const weeks = new Int32Array(total);
  const values = new Float64Array(total);
  for (const b of batches) {
    for (let r = 0; r < b.ids.length; r++) {
      const k = at[b.ids[r]!]!++;
      weeks[k] = b.weeks[r]!;
      values[k] = b.values[r]!;
    }
  }
  batches.length = 0;
  const out = new Map<string, StorePrices>();
  for (const r of series) {
    let store = out.get(r.store_id);
    if (!store) {
      store = { prices: new Map(), deptPrices: new Map() };
      out.set(r.store_id, store);
    }
    const lo = start[r.series_id]!;
    const hi = start[r.series_id + 1]!;
    if (hi === lo) continue;
    let w = weeks.slice(lo, hi);
    let v = values.slice(lo, hi);
    let sorted = true;
    for (let i = 1; i < w.length; i++) if (w[i - 1]! > w[i]!) sorted = false;
    if (!sorted) {
      // Weeks are unique per item and store (the primary key), so the order is total.
      const order = Array.from(w.keys()).sort((x, y) => w[x]! - w[y]!);
      w = Int32Array.from(order, (i) => w[i]!);
      v = Float64Array.from(order, (i) => v[i]!);
    }
    addItemPrices(store, r.item_id, departmentOf.get(r.item_id), w, v);
  }
  return out;
}

/** Departments of every item (for the store's price comparisons). */
export async function readDepartments(s: DbSession): Promise<Map<string, string | null>> {
  const rows = (
    await s.query<{ item_id: string; dept_id: string | null }>('SELECT item_id, dept_id FROM items')
  ).rows;
  return new Map(rows.map((r) => [r.item_id, r.dept_id]));
}

/** Every event (known ahead) and the benefit days of one region. */
export async function readCalendarInputs(
  s: DbSession,
  regionId: string | null,
): Promise<{ events: CalendarEvent[]; benefit: Set<number> }> {
  const ev = (
    await s.query<{ day: string; name: string; kind: string }>('SELECT day, name, kind FROM events')
  ).rows;
  const bd =
    regionId === null
      ? []
      : (await s.query<{ day: string }>('SELECT day FROM benefit_days WHERE region_id = $1', [regionId]))
          .rows;
  return {
    events: ev.map((e) => ({ day: parseDay(e.day)!, name: e.name, kind: e.kind })),
    benefit: new Set(bd.map((r) => parseDay(r.day)!)),
  };
}
