import { type HierarchyLevel, KEY_SEPARATOR } from './hierarchy-levels.js';

/**
 * Statements that materialize RMSSE scales and WRMSSE weights as of a cutoff, all set-based over
 * `sales` rows with `day <= cutoff` (leak-free by construction: nothing later is read).
 *
 * Parameters: $1 = cutoff (date), and for the weight statements $2 = weight days, $3 = the ISO
 * weekday (1 = Monday) on which a price week starts.
 *
 * Missing sales rows count as zero units. The sum of squared one-day differences of the dense,
 * zero-filled series is computed from the sparse rows: consecutive days contribute (y - y')^2; a
 * gap contributes y'^2 (down to zero) + y^2 (back up), the zero days in between add nothing; the
 * days from the last stored row to the cutoff add y_last^2 once.
 */

const SEP_SQL = `E'\\x${KEY_SEPARATOR.charCodeAt(0).toString(16).padStart(2, '0')}'`;

/** SQL expression of a level's key over columns with the hierarchy's names. */
export function keyExpr(level: HierarchyLevel, alias = ''): string {
  if (level.keys.length === 0) return `''::text`;
  const cols = level.keys.map((k) => `${alias}${k}`);
  return cols.length === 1 ? `${cols[0]}::text` : `concat_ws(${SEP_SQL}, ${cols.join(', ')})`;
}

/** The bottom series that can be evaluated: known item and store with every hierarchy attribute. */
export const CREATE_BOTTOM = `
CREATE TEMP TABLE ev_bottom (
  series_id int4 PRIMARY KEY, item_id text NOT NULL, store_id text NOT NULL, dept_id text NOT NULL,
  category_id text NOT NULL, region_id text NOT NULL, first_sale_day date
) ON COMMIT DROP`;

export const FILL_BOTTOM = `
INSERT INTO ev_bottom
SELECT s.series_id, s.item_id, s.store_id, i.dept_id, i.category_id, st.region_id, f.first_sale_day
FROM series s
JOIN items i ON i.item_id = s.item_id
JOIN stores st ON st.store_id = s.store_id
LEFT JOIN (
  SELECT series_id, min(day) AS first_sale_day FROM sales WHERE day <= $1 AND units > 0 GROUP BY series_id
) f ON f.series_id = s.series_id
WHERE i.dept_id IS NOT NULL AND i.category_id IS NOT NULL AND st.region_id IS NOT NULL`;

/** Daily sums by store x department (levels 1-9 roll up from it) and by item x region (10-11). */
export const CREATE_DAILY = `
CREATE TEMP TABLE ev_daily_store (
  region_id text, store_id text, category_id text, dept_id text, day date, y int8
) ON COMMIT DROP;
CREATE TEMP TABLE ev_daily_item (item_id text, category_id text, dept_id text, region_id text, day date, y int8)
  ON COMMIT DROP`;

export const FILL_DAILY_STORE = `
INSERT INTO ev_daily_store
SELECT b.region_id, b.store_id, b.category_id, b.dept_id, s.day, sum(s.units)
FROM sales s JOIN ev_bottom b ON b.series_id = s.series_id
WHERE b.first_sale_day IS NOT NULL AND s.day <= $1
GROUP BY b.region_id, b.store_id, b.category_id, b.dept_id, s.day`;

export const FILL_DAILY_ITEM = `
INSERT INTO ev_daily_item
SELECT b.item_id, b.category_id, b.dept_id, b.region_id, s.day, sum(s.units)
FROM sales s JOIN ev_bottom b ON b.series_id = s.series_id
WHERE b.first_sale_day IS NOT NULL AND s.day <= $1
GROUP BY b.item_id, b.category_id, b.dept_id, b.region_id, s.day`;

const SCALE_COLUMNS = `cutoff, level, key, region_id, store_id, category_id, dept_id, item_id, series_id,
  first_sale_day, n_days, sum_sq_diff, scale, status`;

/** Terms of the sparse squared-difference sum; rows before the first sale are filtered later. */
const TERM = `CASE WHEN pday IS NULL OR pday < first_sale_day THEN 0
      WHEN day - pday = 1 THEN (y - py) * (y - py)
      ELSE y * y + py * py END
    + CASE WHEN nday IS NULL AND day < $1::date THEN y * y ELSE 0 END`;

const FINISH = `n_days, ssd,
  CASE WHEN n_days > 1 THEN ssd::float8 / (n_days - 1) END,
  CASE WHEN n_days = 1 THEN 'one_day' WHEN ssd = 0 THEN 'flat' ELSE 'ok' END`;

const NO_SCALE = `NULL::date, NULL::int4, NULL::int8, NULL::float8, 'no_sale'`;

function keyColumnsOrNull(level: HierarchyLevel, alias = ''): string {
  const all = ['region_id', 'store_id', 'category_id', 'dept_id', 'item_id'] as const;
  return all.map((c) => ((level.keys as readonly string[]).includes(c) ? `${alias}${c}` : 'NULL')).join(', ');
}

/** Scales of an aggregated level (1-11) from its daily source table. */
export function aggregatedScalesSql(
  level: HierarchyLevel,
  source: 'ev_daily_store' | 'ev_daily_item',
): string {
  const cols = level.keys.join(', ');
  const group = level.keys.length ? `${cols}, ` : '';
  return `
WITH agg AS (
  SELECT ${keyExpr(level)} AS key, ${group}day, sum(y) AS y FROM ${source} GROUP BY ${group}day
),
kf AS (SELECT key, ${group}min(day) FILTER (WHERE y > 0) AS first_sale_day FROM agg GROUP BY key${level.keys.length ? `, ${cols}` : ''}),
w AS (
  SELECT a.*, kf.first_sale_day,
    lag(a.day) OVER win AS pday, lag(a.y) OVER win AS py, lead(a.day) OVER win AS nday
  FROM agg a JOIN kf ON kf.key = a.key
  WHERE a.day >= kf.first_sale_day
  WINDOW win AS (PARTITION BY a.key ORDER BY a.day)
),
t AS (
  SELECT key, ${group}first_sale_day, ($1::date - first_sale_day + 1) AS n_days, sum(${TERM}) AS ssd
  FROM w GROUP BY key, ${group}first_sale_day
)
INSERT INTO eval_scales (${SCALE_COLUMNS})
SELECT $1, ${level.level}, key, ${keyColumnsOrNull(level)}, NULL::int4, first_sale_day, ${FINISH}
FROM t
UNION ALL
SELECT $1, ${level.level}, key, ${keyColumnsOrNull(level)}, NULL::int4, ${NO_SCALE}
FROM kf WHERE first_sale_day IS NULL`;
}

/**
 * Scales of the bottom level straight from `sales` (its primary key order feeds the window without
 * a sort), plus a `no_sale` row for each series without a sale on or before the cutoff.
 */
export function bottomScalesSql(level: HierarchyLevel): string {
  return `
WITH w AS (
  SELECT s.series_id, s.day, s.units::int8 AS y, b.first_sale_day,
    lag(s.day) OVER win AS pday, lag(s.units::int8) OVER win AS py, lead(s.day) OVER win AS nday
  FROM sales s JOIN ev_bottom b ON b.series_id = s.series_id
  WHERE s.day <= $1 AND b.first_sale_day IS NOT NULL
  WINDOW win AS (PARTITION BY s.series_id ORDER BY s.day)
),
t AS (
  SELECT series_id, first_sale_day, ($1::date - first_sale_day + 1) AS n_days, sum(${TERM}) AS ssd
  FROM w WHERE day >= first_sale_day GROUP BY series_id, first_sale_day
)
INSERT INTO eval_scales (${SCALE_COLUMNS})
SELECT $1, ${level.level}, ${keyExpr(level, 'b.')}, ${keyColumnsOrNull(level, 'b.')}, b.series_id,
  t.first_sale_day, ${FINISH}
FROM t JOIN ev_bottom b ON b.series_id = t.series_id
UNION ALL
SELECT $1, ${level.level}, ${keyExpr(level, 'b.')}, ${keyColumnsOrNull(level, 'b.')}, b.series_id,
  ${NO_SCALE}
FROM ev_bottom b WHERE b.first_sale_day IS NULL`;
}

/**
 * Dollar sales per evaluated bottom series over days (cutoff - weight days, cutoff]: units x the
 * price of the week containing the day; days without a price add nothing; a negative net (returns
 * beyond sales) counts as zero.
 */
export const CREATE_DOLLARS = `
CREATE TEMP TABLE ev_dollars (series_id int4 PRIMARY KEY, dollars float8 NOT NULL) ON COMMIT DROP`;

export const FILL_DOLLARS = `
INSERT INTO ev_dollars
SELECT b.series_id, greatest(coalesce(sum(s.units * p.price), 0), 0)::float8
FROM ev_bottom b
LEFT JOIN sales s ON s.series_id = b.series_id AND s.day > $1::date - $2::int AND s.day <= $1::date
LEFT JOIN prices p ON p.item_id = b.item_id AND p.store_id = b.store_id
  AND p.week_start = s.day - ((extract(isodow FROM s.day)::int - $3::int + 7) % 7)
WHERE b.first_sale_day IS NOT NULL
GROUP BY b.series_id`;

/** One level's weights: its series' dollars over the total (NULL weights when the total is 0). */
export function weightsSql(level: HierarchyLevel): string {
  return `
WITH total AS (SELECT sum(dollars) AS t FROM ev_dollars)
INSERT INTO eval_weights (cutoff, weight_days, level, key, dollars, weight)
SELECT $1, $2, ${level.level}, ${keyExpr(level, 'b.')}, sum(d.dollars),
  CASE WHEN (SELECT t FROM total) > 0 THEN sum(d.dollars) / (SELECT t FROM total) END
FROM ev_dollars d JOIN ev_bottom b ON b.series_id = d.series_id
GROUP BY ${keyExpr(level, 'b.')}`;
}
