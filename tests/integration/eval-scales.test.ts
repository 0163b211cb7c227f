import fc from 'fast-check';
import { beforeAll, describe, expect, test } from 'vitest';
import { formatDay, parseDay } from '../../src/core/days.js';
import { HIERARCHY_LEVELS } from '../../src/eval/hierarchy-levels.js';
import { materializeScales } from '../../src/eval/materialize-scales.js';
import { rmsseScale } from '../../src/eval/metrics.js';
import { useTestDb } from '../helpers/db.js';
import { CUTOFF, seedChain, seriesRows, twoItemChain } from './eval-fixtures.js';

const t = useTestDb(import.meta.url);

describe('materialized scales and weights on the REFERENCES.md §5.3 chain', () => {
  beforeAll(async () => {
    await seedChain(t().db, twoItemChain);
  });

  test('scales of the bottom and aggregated series match the hand-computed ones', async () => {
    const { db, config } = t();
    const summary = await materializeScales(db, config, { cutoff: CUTOFF, weightDays: 2 });
    expect(summary).toMatchObject({ bottomSeries: 2, evaluatedSeries: 2, noSaleSeries: 0, totalDollars: 41 });
    const rows = await db.query<{
      level: number;
      key: string;
      scale: number;
      first_sale_day: string;
      n_days: number;
    }>(
      `SELECT level, key, scale, first_sale_day::text, n_days FROM eval_scales WHERE cutoff = $1 ORDER BY level, key`,
      [CUTOFF],
    );
    expect(rows.rows).toHaveLength(9 + 3 * 2);
    for (const r of rows.rows) {
      if (r.level <= 9)
        expect(r.scale).toBeCloseTo(43 / 7, 12); // A + B: sum of squares 43 over 7
      else if (r.key.startsWith('A')) {
        expect(r.scale).toBeCloseTo(6, 12); // leading zeros trimmed (and stored as missing rows)
        expect(r).toMatchObject({ first_sale_day: '2024-01-03', n_days: 6 });
      } else expect(r.scale).toBeCloseTo(4 / 7, 12);
    }
  });

  test('weights: 16/41 and 25/41 at the item levels, 1 at the others; each level sums to 1', async () => {
    const { db } = t();
    const w = await db.query<{ level: number; key: string; dollars: number; weight: number }>(
      'SELECT level, key, dollars, weight FROM eval_weights WHERE cutoff = $1 AND weight_days = 2 ORDER BY level, key',
      [CUTOFF],
    );
    for (const r of w.rows) {
      if (r.level <= 9) expect(r.weight).toBeCloseTo(1, 12);
      else expect(r.weight).toBeCloseTo(r.key.startsWith('A') ? 16 / 41 : 25 / 41, 12);
    }
    const sums = await db.query<{ level: number; s: number }>(
      'SELECT level, sum(weight) AS s FROM eval_weights WHERE cutoff = $1 AND weight_days = 2 GROUP BY level',
      [CUTOFF],
    );
    expect(sums.rows).toHaveLength(12);
    for (const r of sums.rows) expect(r.s).toBeCloseTo(1, 12);
  });

  test('leak-free: changing sales after the cutoff changes no scale or weight', async () => {
    const { db, config } = t();
    const before = await db.query(
      'SELECT level, key, scale FROM eval_scales WHERE cutoff = $1 ORDER BY level, key',
      [CUTOFF],
    );
    await db.query(`UPDATE sales SET units = units + 17 WHERE day > $1`, [CUTOFF]);
    await materializeScales(db, config, { cutoff: CUTOFF, weightDays: 2 });
    const after = await db.query(
      'SELECT level, key, scale FROM eval_scales WHERE cutoff = $1 ORDER BY level, key',
      [CUTOFF],
    );
    expect(after.rows).toEqual(before.rows);
    await db.query(`UPDATE sales SET units = units - 17 WHERE day > $1`, [CUTOFF]);
  });
});

describe('reported cases', () => {
  test('a series with no sale before the cutoff gets no scale; zero dollars are reported', async () => {
    const { db, config } = t();
    await seedChain(db, {
      items: [
        ['A', 'D1', 'C1'],
        ['N', 'D1', 'C1'],
      ],
      stores: [['S1', 'R1']],
      sales: [
        ...seriesRows('A', 'S1', '2024-01-01', [1, 2, 0, 3]),
        ...seriesRows('N', 'S1', '2024-01-01', [0, 0, 0, 0, 5]),
      ],
    });
    const s = await materializeScales(db, config, { cutoff: '2024-01-04' });
    expect(s.noSaleSeries).toBe(1);
    expect(s.problems.join('\n')).toMatch(/1 series have no sale on or before 2024-01-04/);
    expect(s.problems.join('\n')).toMatch(/zero at every level/);
    const n = await db.query<{ status: string; scale: number | null }>(
      `SELECT status, scale FROM eval_scales WHERE cutoff = '2024-01-04' AND item_id = 'N'`,
    );
    expect(n.rows).toEqual([{ status: 'no_sale', scale: null }]);
    // No prices at all: every weight is undefined, none is a division by zero.
    const w = await db.query<{ n: number; nulls: number }>(
      `SELECT count(*)::int AS n, count(*) FILTER (WHERE weight IS NULL)::int AS nulls FROM eval_weights WHERE cutoff = '2024-01-04'`,
    );
    expect(w.rows[0]!.n).toBeGreaterThan(0);
    expect(w.rows[0]!.nulls).toBe(w.rows[0]!.n);
  });

  test('a cutoff after the last sales day is refused', async () => {
    const { db, config } = t();
    await expect(materializeScales(db, config, { cutoff: '2030-01-01' })).rejects.toThrow(
      /after the last sales day/,
    );
    await expect(materializeScales(db, config, { cutoff: '2024-13-01' })).rejects.toThrow(/not a valid day/);
  });
});

describe('SQL scales equal the array computation on zero-filled series (property)', () => {
  test('random sparse chains, every level', async () => {
    const { db, config } = t();
    const stores: Array<[string, string]> = [
      ['S1', 'R1'],
      ['S2', 'R1'],
      ['S3', 'R2'],
    ];
    const items: Array<[string, string, string]> = [
      ['I1', 'D1', 'C1'],
      ['I2', 'D1', 'C1'],
      ['I3', 'D2', 'C2'],
    ];
    const days = 15;
    const cutoffIndex = 11;
    const arb = fc.array(fc.array(fc.integer({ min: -1, max: 6 }), { minLength: days, maxLength: days }), {
      minLength: 9,
      maxLength: 9,
    });
    await fc.assert(
      fc.asyncProperty(arb, fc.array(fc.boolean(), { minLength: 9, maxLength: 9 }), async (units, sparse) => {
        const bottom = items.flatMap((it, i) =>
          stores.map((st, j) => ({ it, st, u: units[i * 3 + j]!, sp: sparse[i * 3 + j]! })),
        );
        const sales = bottom.flatMap((b) => seriesRows(b.it[0], b.st[0], '2024-03-01', b.u, b.sp));
        if (sales.length === 0) return;
        await seedChain(db, { items, stores, sales });
        const cutoff = formatDay(parseDay('2024-03-01')! + cutoffIndex);
        const last = sales
          .map((r) => r.day)
          .sort()
          .at(-1)!;
        if (last < cutoff) return; // refused, tested above
        await materializeScales(db, config, { cutoff });
        const got = await db.query<{ level: number; key: string; scale: number | null; status: string }>(
          'SELECT level, key, scale, status FROM eval_scales WHERE cutoff = $1',
          [cutoff],
        );
        const stored = new Set(sales.map((r) => `${r.item}|${r.store}`));
        for (const level of HIERARCHY_LEVELS) {
          const sums = new Map<string, number[]>();
          for (const b of bottom) {
            if (!stored.has(`${b.it[0]}|${b.st[0]}`)) continue;
            const hist = b.u.slice(0, cutoffIndex + 1);
            if (level.level !== 12 && !hist.some((v) => v > 0)) continue; // not evaluated
            const attrs = {
              item_id: b.it[0],
              dept_id: b.it[1],
              category_id: b.it[2],
              store_id: b.st[0],
              region_id: b.st[1],
            };
            const key = level.keys.map((k) => attrs[k]).join('\u001f');
            const acc = sums.get(key) ?? new Array(cutoffIndex + 1).fill(0);
            hist.forEach((v, i) => {
              acc[i] += v;
            });
            sums.set(key, acc);
          }
          for (const [key, y] of sums) {
            const row = got.rows.find((r) => r.level === level.level && r.key === key);
            const want = rmsseScale(y);
            expect(row?.status, `level ${level.level} ${key}`).toBe(want.status);
            if (want.status === 'ok' || want.status === 'flat')
              expect(row!.scale!).toBeCloseTo(want.scale, 9);
          }
          expect(got.rows.filter((r) => r.level === level.level)).toHaveLength(sums.size);
        }
      }),
      { numRuns: 25 },
    );
  });
});
