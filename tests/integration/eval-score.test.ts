import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { DuckDBInstance } from '@duckdb/node-api';
import { beforeEach, describe, expect, test } from 'vitest';
import { formatDay, parseDay } from '../../src/core/days.js';
import { readCopyBinary } from '../../src/db/binary-copy.js';
import { aggregateBottomUp, groupBottom, HIERARCHY_LEVELS } from '../../src/eval/hierarchy-levels.js';
import { keyExpr } from '../../src/eval/scales-sql.js';
import { scoreForecasts } from '../../src/eval/score-forecasts.js';
import { useTestDb } from '../helpers/db.js';
import { CUTOFF, seedChain, seriesRows, twoItemChain } from './eval-fixtures.js';

const t = useTestDb(import.meta.url);
const dir = mkdtempSync(join(tmpdir(), 'larder-score-'));

function csv(name: string, lines: string[]): string {
  const p = join(dir, name);
  writeFileSync(p, `${lines.join('\n')}\n`);
  return p;
}

// REFERENCES.md §5.3: forecasts A [3, 3], B [2, 2] for the two days after the cutoff.
const GOOD = [
  'item_id,store_id,day,value',
  'A,S1,2024-01-09,3',
  'A,S1,2024-01-10,3',
  'B,S1,2024-01-09,2',
  'B,S1,2024-01-10,2',
];
const ITEM_LEVEL = 0.7296910077; // REFERENCES.md §5.3, item level
const TOTAL_LEVEL = 0.2852987011; // REFERENCES.md §5.3, total level
// Levels 1-9 all equal the total here (one region, store, category, department); 10-12 the item level.
const TWELVE_LEVELS = (9 * TOTAL_LEVEL + 3 * ITEM_LEVEL) / 12;

async function counts() {
  const { db } = t();
  const r = await db.query<{ scores: number; mats: number; scales: number }>(
    `SELECT (SELECT count(*) FROM eval_scores)::int AS scores, (SELECT count(*) FROM eval_materializations)::int AS mats,
            (SELECT count(*) FROM eval_scales)::int AS scales`,
  );
  return r.rows[0]!;
}

describe('scoring on the REFERENCES.md §5.3 chain', () => {
  beforeEach(async () => {
    const { db } = t();
    await db.exec('TRUNCATE eval_scores, eval_materializations, eval_scales, eval_weights');
    await seedChain(db, twoItemChain);
  });

  test('a CSV file: every level and the WRMSSE match the hand-computed values', async () => {
    const { db, config } = t();
    const r = await scoreForecasts(db, config, {
      cutoff: CUTOFF,
      forecastsPath: csv('good.csv', GOOD),
      weightDays: 2,
    });
    expect(r.horizon).toBe(2);
    expect(r.materialized).toBe(true);
    const mine = r.sources[0]!;
    expect(mine.source).toBe('good.csv');
    for (const l of mine.levels) expect(l.score).toBeCloseTo(l.level <= 9 ? TOTAL_LEVEL : ITEM_LEVEL, 9);
    expect(mine.wrmsse).toBeCloseTo(TWELVE_LEVELS, 9);
    // The per-series RMSSE of item A (REFERENCES.md §5.2).
    const a = r.series.find((s) => s.level === 12 && s.key.startsWith('A'))!;
    expect(a.rmsse[0]).toBeCloseTo(0.4082482905, 9);
    expect((await counts()).scores).toBe(3);
  });

  test('the reference forecasts: naive repeats the cutoff day, seasonal naive the same weekday', async () => {
    const { db, config } = t();
    const r = await scoreForecasts(db, config, { cutoff: CUTOFF, horizon: 2, weightDays: 2 });
    expect(r.sources.map((s) => s.source)).toEqual(['naive', 'seasonal_naive']);
    // Naive: A's last value 3, B's 2 -- the very forecasts of §5.3.
    expect(r.sources[0]!.wrmsse).toBeCloseTo(TWELVE_LEVELS, 9);
    // Seasonal naive (by hand): A takes days 2-3 -> [0, 3], B -> [2, 2]; actuals A [4, 2], B [2, 3].
    const rA = Math.sqrt((16 + 1) / 2 / 6);
    const rB = Math.sqrt(1 / 2 / (4 / 7));
    const rT = Math.sqrt((16 + 0) / 2 / (43 / 7)); // total forecast [2, 5] vs actual [6, 5]
    const item = (16 / 41) * rA + (25 / 41) * rB;
    expect(r.sources[1]!.wrmsse).toBeCloseTo((9 * rT + 3 * item) / 12, 9);
  });

  test('a Parquet file gives the same scores', async () => {
    const { db, config } = t();
    const duck = await (await DuckDBInstance.create(':memory:')).connect();
    const p = join(dir, 'good.parquet');
    await duck.run(
      `COPY (SELECT * FROM read_csv('${csv('for-parquet.csv', GOOD)}', columns = {'item_id': 'VARCHAR', 'store_id': 'VARCHAR', 'day': 'DATE', 'value': 'DOUBLE'}))
       TO '${p}' (FORMAT parquet)`,
    );
    duck.closeSync();
    const r = await scoreForecasts(db, config, { cutoff: CUTOFF, forecastsPath: p, weightDays: 2 });
    expect(r.sources[0]!.wrmsse).toBeCloseTo(TWELVE_LEVELS, 9);
  });

  const bad: Array<[string, string[], RegExp]> = [
    ['missing', GOOD.slice(0, 4), /missing rows .*\(1\):\n\s+B\/S1 2024-01-10/],
    [
      'duplicate',
      [...GOOD, 'A,S1,2024-01-09,4'],
      /duplicate rows \(1\):\n\s+\S+duplicate.csv:6 A\/S1 2024-01-09: duplicate of line 2/,
    ],
    [
      'extra',
      [...GOOD, 'Z,S1,2024-01-09,1'],
      /extra rows .*\(1\):\n\s+\S+extra.csv:6 Z\/S1: not an evaluated series/,
    ],
    [
      'negative',
      [...GOOD.slice(0, 4), 'B,S1,2024-01-10,-1'],
      /negative values \(1\):\n\s+\S+negative.csv:5 B\/S1 2024-01-10: negative value -1/,
    ],
    [
      'outside',
      [...GOOD, 'A,S1,2024-01-08,1'],
      /days outside the horizon \(1\):\n\s+\S+outside.csv:6 A\/S1: day 2024-01-08/,
    ],
    [
      'header',
      ['item_id,store_id,day,forecast', 'A,S1,2024-01-09,3'],
      /missing column\(s\) value; unexpected column\(s\) forecast/,
    ],
    [
      'unreadable',
      [...GOOD.slice(0, 4), 'B,S1,2024-02-30,2'],
      /unreadable rows \(1\):\n\s+\S+unreadable.csv:5 B\/S1: day '2024-02-30'/,
    ],
    [
      'ragged',
      [...GOOD.slice(0, 4), 'B,S1,2024-01-10'],
      /unreadable rows \(1\):\n\s+\S+ragged.csv:5 B\/S1: 3 field\(s\), expected 4/,
    ],
  ];
  for (const [kind, lines, message] of bad) {
    test(`a file with ${kind} rows is refused with its offenders and nothing is written`, async () => {
      const { db, config } = t();
      const before = await counts();
      expect(before).toEqual({ scores: 0, mats: 0, scales: 0 });
      const run = scoreForecasts(db, config, {
        cutoff: CUTOFF,
        forecastsPath: csv(`${kind}.csv`, lines),
        weightDays: 2,
        horizon: 2,
      });
      await expect(run).rejects.toThrow(message);
      // The scales materialized on demand rolled back with the refused file.
      expect(await counts()).toEqual(before);
    });
  }

  test('actuals that do not cover the horizon are refused', async () => {
    const { db, config } = t();
    await expect(scoreForecasts(db, config, { cutoff: CUTOFF, horizon: 3 })).rejects.toThrow(
      /actual sales end at 2024-01-10: scoring 3 days after 2024-01-08 needs sales up to 2024-01-11/,
    );
    expect((await counts()).scores).toBe(0);
  });

  test('zero dollar sales in the weight window: reported, WRMSSE undefined, nothing divided by zero', async () => {
    const { db, config } = t();
    await db.exec('TRUNCATE prices');
    const r = await scoreForecasts(db, config, { cutoff: CUTOFF, horizon: 2, weightDays: 2 });
    expect(r.problems.join('\n')).toMatch(/zero at every level/);
    for (const s of r.sources) {
      expect(Number.isNaN(s.wrmsse)).toBe(true);
      for (const l of s.levels) expect(l.excluded).toBe(l.series);
    }
  });
});

describe('bottom-up aggregation equals SQL GROUP BY sums at every level', () => {
  test('a chain of 3 regions, 5 stores, 2 categories, 4 departments, 6 items', async () => {
    const { db } = t();
    const stores: Array<[string, string]> = [
      ['S1', 'R1'],
      ['S2', 'R1'],
      ['S3', 'R2'],
      ['S4', 'R3'],
      ['S5', 'R3'],
    ];
    const items: Array<[string, string, string]> = [
      ['I1', 'D1', 'C1'],
      ['I2', 'D1', 'C1'],
      ['I3', 'D2', 'C1'],
      ['I4', 'D3', 'C2'],
      ['I5', 'D4', 'C2'],
      ['I6', 'D4', 'C2'],
    ];
    let seed = 7;
    const rnd = () => {
      seed = (seed * 1103515245 + 12345) % 2 ** 31;
      return seed / 2 ** 31;
    };
    const sales = items.flatMap(([i]) =>
      stores.flatMap(([s]) =>
        seriesRows(
          i,
          s,
          '2024-05-01',
          Array.from({ length: 20 }, () => Math.floor(rnd() * 6)),
          true,
        ),
      ),
    );
    await seedChain(db, { items, stores, sales });
    const first = parseDay('2024-05-11')!;
    const h = 10;
    const bottom = (
      await db.query<{
        series_id: number;
        item_id: string;
        store_id: string;
        dept_id: string;
        category_id: string;
        region_id: string;
      }>(
        `SELECT s.series_id, s.item_id, s.store_id, i.dept_id, i.category_id, st.region_id
         FROM series s JOIN items i USING (item_id) JOIN stores st USING (store_id) ORDER BY s.series_id`,
      )
    ).rows.map((r) => ({ seriesId: r.series_id, ...r }));
    const pos = new Map(bottom.map((b, i) => [b.seriesId, i]));
    const values = new Float64Array(bottom.length * h);
    for await (const b of readCopyBinary(
      db.copyTo(
        `COPY (SELECT series_id, day, units FROM sales WHERE day >= '2024-05-11' AND day < '2024-05-21') TO STDOUT (FORMAT binary)`,
      ),
      ['int4', 'date', 'int4'],
    )) {
      for (let r = 0; r < b.length; r++) {
        const i = pos.get((b.columns[0] as Int32Array)[r]!)!;
        values[i * h + (b.columns[1] as Int32Array)[r]! - first] = (b.columns[2] as Int32Array)[r]!;
      }
    }
    for (const level of HIERARCHY_LEVELS) {
      const g = groupBottom(level, bottom);
      const agg = aggregateBottomUp(values, g.groupOf, g.keys.length, h);
      const sql = await db.query<{ key: string; day: string; y: number }>(
        `SELECT ${keyExpr(level)} AS key, day::text AS day, sum(units)::int AS y
         FROM sales JOIN series USING (series_id) JOIN items USING (item_id) JOIN stores USING (store_id)
         WHERE day >= '2024-05-11' AND day < '2024-05-21' GROUP BY 1, 2`,
      );
      const got = new Map(sql.rows.map((r) => [`${r.key}|${r.day}`, r.y]));
      for (let k = 0; k < g.keys.length; k++) {
        for (let j = 0; j < h; j++) {
          expect(agg[k * h + j], `level ${level.name} ${g.keys[k]} day ${j}`).toBe(
            got.get(`${g.keys[k]}|${formatDay(first + j)}`) ?? 0,
          );
        }
      }
    }
  });
});
