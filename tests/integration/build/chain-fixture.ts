import type { DbSession } from '../../../src/db/database.js';

/** Size of a test chain; every value in it follows from these with set-based SQL. */
export interface ChainShape {
  readonly stores: number;
  readonly items: number;
  readonly start: string;
  readonly days: number;
  /** Changes every generated value (audit and property tests use several). */
  readonly seed?: number;
}

/**
 * Inserts a small fictional chain (stores in two regions, items in two categories and three
 * departments) with set-based SQL: daily sales with gaps, long zero runs (stock-outs) and a
 * few returns, weekly prices starting on Saturdays with changes, events of three kinds (one day
 * with two events) and benefit days in one region. Test data only.
 */
export async function insertChain(db: DbSession, shape: ChainShape): Promise<void> {
  const seed = shape.seed ?? 1;
  const start = `DATE '${shape.start}'`;
  await db.exec(`
    INSERT INTO stores (store_id, region_id)
      SELECT 'st' || s, CASE WHEN s % 2 = 0 THEN 'north' ELSE 'south' END FROM generate_series(1, ${shape.stores}) s;
    INSERT INTO items (item_id, dept_id, category_id)
      SELECT 'it' || lpad(i::text, 3, '0'), 'd' || (i % 3), CASE WHEN i % 3 = 2 THEN 'c1' ELSE 'c0' END
      FROM generate_series(1, ${shape.items}) i;
    INSERT INTO series (item_id, store_id)
      SELECT 'it' || lpad(i::text, 3, '0'), 'st' || s FROM generate_series(1, ${shape.stores}) s, generate_series(1, ${shape.items}) i
      ORDER BY s, i;
    -- Units: a level per series, a weekly cycle and noise; every 13th day missing for some
    -- series; a zero run of 20 days in a third of the series; an occasional return.
    INSERT INTO sales (series_id, day, units)
      SELECT r.series_id, ${start} + d,
        CASE
          WHEN r.series_id % 3 = 0 AND d BETWEEN 60 + (r.series_id % 7) AND 79 + (r.series_id % 7) THEN 0
          WHEN abs(hashint8extended(r.series_id * 100000 + d, ${seed})) % 97 = 0 THEN -1
          ELSE ((r.series_id % 5) + 1) * (1 + (d % 7 = 5)::int) + abs(hashint8extended(r.series_id * 100000 + d, ${seed + 1})) % 6
            - CASE WHEN abs(hashint8extended(r.series_id * 7 + d, ${seed + 2})) % 4 = 0 THEN ((r.series_id % 5) + 1) ELSE 0 END
        END
      FROM series r, generate_series(0, ${shape.days - 1}) d
      WHERE NOT (r.series_id % 4 = 1 AND d % 13 = 5)
        AND d >= (r.series_id % 6) * 3;
    -- Weekly prices (weeks start on Saturday), changing every few weeks; some weeks missing.
    INSERT INTO prices (item_id, store_id, week_start, price)
      SELECT r.item_id, r.store_id, w.ws,
        round((2 + (r.series_id % 4) * 0.75 + (abs(hashint8extended(r.series_id * 1000 + (w.k / 3), ${seed + 3})) % 5) * 0.25)::numeric, 2)
      FROM series r,
        LATERAL (SELECT k, (${start} - ((extract(isodow FROM ${start})::int + 1) % 7)) + 7 * k AS ws
                 FROM generate_series(0, ${Math.ceil(shape.days / 7) + 2}) k) w
      WHERE NOT (r.series_id % 5 = 2 AND w.k % 11 = 4);
    INSERT INTO calendar_days (day) SELECT ${start} + d FROM generate_series(-10, ${shape.days + 60}) d;
    INSERT INTO events (day, name, kind)
      SELECT ${start} + d, CASE d % 3 WHEN 0 THEN 'Harvest Fair' WHEN 1 THEN 'River Race' ELSE 'Lantern Night' END,
             CASE d % 3 WHEN 0 THEN 'cultural' WHEN 1 THEN 'sporting' ELSE 'national' END
      FROM generate_series(5, ${shape.days + 50}, 17) d;
    INSERT INTO events (day, name, kind) VALUES (${start} + 22, 'Founders Day', 'national');
    INSERT INTO benefit_days (region_id, day)
      SELECT 'north', ${start} + d FROM generate_series(0, ${shape.days + 40}) d WHERE extract(day FROM ${start} + d) IN (1, 2, 15);
  `);
}
