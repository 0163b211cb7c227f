import { createHash } from 'node:crypto';
import { mkdtempSync, readdirSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { formatDay, isoWeekday, parseDay } from '../../src/core/days.js';
import { type FaultsFile, readFaultsFile } from '../../src/demo/faults-file.js';
import { generateChain } from '../../src/demo/generate-chain.js';

// Invented data checked for its own consistency: every fault recorded in faults.json must be
// visible in the files exactly as recorded, and the generator's totals must match the files.

const SIZE = { stores: 3, items: 40, days: 420, startDay: '2022-01-01' } as const;
let root: string;
let dirA: string;
let faults: FaultsFile;

beforeAll(async () => {
  root = mkdtempSync(join(tmpdir(), 'larder-gen-'));
  dirA = join(root, 'a');
  await generateChain({ dir: dirA, ...SIZE, seed: 11 });
  faults = await readFaultsFile(join(dirA, 'faults.json'));
});
afterAll(() => rmSync(root, { recursive: true, force: true }));

const read = (dir: string, f: string) => readFileSync(join(dir, f), 'utf8');
const rows = (dir: string, f: string) =>
  read(dir, f)
    .split('\n')
    .slice(1)
    .filter((l) => l.length > 0)
    .map((l) => l.split(','));
const files = (dir: string): string[] =>
  readdirSync(dir, { recursive: true, withFileTypes: true })
    .filter((e) => e.isFile())
    .map((e) => join(e.parentPath, e.name).slice(dir.length + 1))
    .sort();
const digest = (dir: string) =>
  Object.fromEntries(
    files(dir).map((f) => [
      f,
      createHash('sha256')
        .update(readFileSync(join(dir, f)))
        .digest('hex'),
    ]),
  );

/** Series as maps day -> units, from a long sales file (first occurrence wins, as stored). */
function seriesOf(dir: string) {
  const m = new Map<string, Map<string, number>>();
  for (const [item, store, day, units] of rows(dir, 'sales.csv')) {
    const k = `${item}|${store}`;
    const s = m.get(k) ?? new Map<string, number>();
    m.set(k, s);
    if (!s.has(day as string)) s.set(day as string, Number(units));
  }
  return m;
}

describe('determinism', () => {
  test('the same seed gives byte-identical files; another seed differs', async () => {
    const dirB = join(root, 'b');
    const dirC = join(root, 'c');
    await generateChain({ dir: dirB, ...SIZE, seed: 11 });
    await generateChain({ dir: dirC, ...SIZE, seed: 12 });
    const a = digest(dirA);
    expect(Object.keys(a)).toContain('corrections/sales.csv');
    expect(digest(dirB)).toEqual(a);
    const c = digest(dirC);
    expect(c['sales.csv']).not.toBe(a['sales.csv']);
    expect(c['prices.csv']).not.toBe(a['prices.csv']);
  });

  test('a seed past 2^32 is its own stream', async () => {
    const d1 = join(root, 'big1');
    const d2 = join(root, 'big2');
    await generateChain({ dir: d1, stores: 1, items: 8, days: 120, seed: 2 ** 32 + 11 });
    await generateChain({ dir: d2, stores: 1, items: 8, days: 120, seed: 11 });
    expect(read(d1, 'sales.csv')).not.toBe(read(d2, 'sales.csv'));
  });

  test('the wide layout carries exactly the long layout data', async () => {
    const dirW = join(root, 'w');
    await generateChain({ dir: dirW, ...SIZE, seed: 11, layout: 'wide' });
    const [header, ...lines] = read(dirW, 'sales.csv').trimEnd().split('\n');
    const days = (header as string).split(',').slice(2);
    expect(days).toHaveLength(SIZE.days);
    const wide = new Map<string, Map<string, number>>();
    for (const line of lines) {
      const [item, store, ...cells] = line.split(',');
      const s = new Map<string, number>();
      cells.forEach((c, i) => {
        if (c !== '') s.set(days[i] as string, Number(c));
      });
      wide.set(`${item}|${store}`, s); // a repeated line repeats the same values
    }
    expect(wide).toEqual(seriesOf(dirA));
    expect(read(dirW, 'prices.csv')).toBe(read(dirA, 'prices.csv'));
    const wf = await readFaultsFile(join(dirW, 'faults.json'));
    expect(wf.totals.tables).toEqual(faults.totals.tables);
  });
});

describe('faults.json against the files', () => {
  test('every duplicate line really appears twice, and no other line does', () => {
    const lines = read(dirA, 'sales.csv').split('\n');
    const dups = faults.faults.filter((f) => f.kind === 'duplicate-row');
    expect(dups.length).toBeGreaterThanOrEqual(3);
    for (const d of dups) {
      const [a, b] = d.lines;
      expect(lines[a - 1]).toBe(`${d.item_id},${d.store_id},${d.day},${d.units}`);
      expect(lines[b - 1]).toBe(lines[a - 1]);
    }
    const seen = new Set<string>();
    let repeated = 0;
    for (const l of lines.slice(1)) {
      if (l && seen.has(l)) repeated++;
      seen.add(l);
    }
    expect(repeated).toBe(dups.length);
    expect(faults.totals.rejects.sales).toBe(dups.length);
  });

  test('the calendar gap day is absent from calendar.csv and is the correction', () => {
    const gap = faults.faults.find((f) => f.kind === 'calendar-gap');
    const cal = rows(dirA, 'calendar.csv').map((r) => r[0]);
    expect(cal).toHaveLength(SIZE.days - 1);
    expect(cal).not.toContain(gap?.day);
    expect(rows(dirA, 'corrections/calendar.csv').map((r) => r[0])).toEqual([gap?.day]);
    const first = parseDay(SIZE.startDay) as number;
    const all = Array.from({ length: SIZE.days }, (_, i) => formatDay(first + i)).filter(
      (d) => d !== gap?.day,
    );
    expect(cal).toEqual(all);
  });

  test('price spikes are written at >= 3x or <= 1/3 of the regular price; the correction has the true price', () => {
    const prices = new Map(rows(dirA, 'prices.csv').map(([i, s, w, p]) => [`${i}|${s}|${w}`, Number(p)]));
    const fixes = new Map(
      rows(dirA, 'corrections/prices.csv').map(([i, s, w, p]) => [`${i}|${s}|${w}`, Number(p)]),
    );
    const spikes = faults.faults.filter((f) => f.kind === 'price-spike');
    expect(spikes.length).toBeGreaterThanOrEqual(4);
    expect(fixes.size).toBe(spikes.length);
    for (const s of spikes) {
      const key = `${s.item_id}|${s.store_id}|${s.week_start}`;
      expect(prices.get(key)).toBe(s.written_price);
      expect(fixes.get(key)).toBe(s.true_price);
      const ratio = s.written_price / s.regular_price;
      expect(ratio >= 3 || ratio <= 1 / 3).toBe(true);
      // The weeks around a spike carry the regular price, so the spike stands out.
      const wk = parseDay(s.week_start) as number;
      expect(prices.get(`${s.item_id}|${s.store_id}|${formatDay(wk - 7)}`)).toBeGreaterThan(0);
    }
  });

  test('stock-out days are stored zeros; missing days have no row but lie inside the span', () => {
    const series = seriesOf(dirA);
    const stockouts = faults.faults.filter((f) => f.kind === 'stockout');
    expect(stockouts.length).toBeGreaterThanOrEqual(6);
    for (const s of stockouts) {
      const ser = series.get(`${s.item_id}|${s.store_id}`) as Map<string, number>;
      expect(s.length).toBeGreaterThanOrEqual(10);
      expect(s.length).toBeLessThanOrEqual(25);
      const d0 = parseDay(s.first_day) as number;
      for (let i = 0; i < s.length; i++) expect(ser.get(formatDay(d0 + i))).toBe(0);
      expect(s.true_units).toHaveLength(s.length);
    }
    // Most runs sit in series whose rate makes them detectable, by the model and by the rule.
    const fast = stockouts.filter((s) => s.placement === 'fast');
    expect(fast.filter((s) => s.model.detectable).length / fast.length).toBeGreaterThan(0.8);
    expect(fast.filter((s) => s.rule.kind === 'stockout').length / fast.length).toBeGreaterThan(0.8);
    for (const s of fast.filter((x) => x.rule.kind === 'stockout')) {
      expect(
        s.rule.detectable_day! >= s.rule.run_first_day && s.rule.detectable_day! <= s.rule.run_last_day,
      ).toBe(true);
    }

    const missing = faults.faults.filter((f) => f.kind === 'missing-days');
    expect(missing.length).toBeGreaterThanOrEqual(4);
    for (const m of missing) {
      const ser = series.get(`${m.item_id}|${m.store_id}`) as Map<string, number>;
      const days = [...ser.keys()].sort();
      for (const d of m.days) {
        expect(ser.has(d)).toBe(false);
        expect(days[0]! < d && d < days[days.length - 1]!).toBe(true);
      }
    }
  });

  test('negative units and unknown items are in the files as recorded', () => {
    const series = seriesOf(dirA);
    const negatives = faults.faults.filter((f) => f.kind === 'negative-units');
    expect(negatives.length).toBeGreaterThanOrEqual(3);
    for (const n of negatives) {
      expect(n.units).toBeLessThan(0);
      expect(series.get(`${n.item_id}|${n.store_id}`)?.get(n.day)).toBe(n.units);
    }
    const known = new Set(rows(dirA, 'items.csv').map((r) => r[0]));
    const fixed = rows(dirA, 'corrections/items.csv');
    const unknown = faults.faults.filter((f) => f.kind === 'unknown-item');
    expect(unknown.length).toBeGreaterThanOrEqual(1);
    expect(fixed.map((r) => r[0]).sort()).toEqual(unknown.map((u) => u.item_id).sort());
    for (const u of unknown) {
      expect(known.has(u.item_id)).toBe(false);
      const sold = [...series.keys()].filter((k) => k.startsWith(`${u.item_id}|`));
      expect(sold).toHaveLength(SIZE.stores);
      expect(sold.reduce((a, k) => a + (series.get(k)?.size ?? 0), 0)).toBe(u.sales_rows);
    }
  });

  test('the partial-load day lacks most rows; its volume is below half the weekday median', () => {
    const p = faults.faults.find((f) => f.kind === 'partial-load');
    if (!p) throw new Error('no partial-load fault');
    const volume = new Map<string, number>();
    let rowsThatDay = 0;
    for (const [, , day, units] of rows(dirA, 'sales.csv')) {
      volume.set(day as string, (volume.get(day as string) ?? 0) + Number(units));
      if (day === p.day) rowsThatDay++;
    }
    // The file's duplicate lines never fall on the partial day, so file counts equal stored ones.
    expect(rowsThatDay).toBe(p.rows_written);
    expect(p.rows_written / p.rows_true).toBeLessThan(0.35);
    const d = parseDay(p.day) as number;
    const prev = [7, 14, 21, 28].map((k) => volume.get(formatDay(d - k)) ?? 0).sort((a, b) => a - b);
    const median = ((prev[1] as number) + (prev[2] as number)) / 2;
    expect(median).toBe(p.weekday_median);
    expect(volume.get(p.day)).toBe(p.units_written);
    expect(p.ratio).toBeLessThan(0.5);
    const fix = rows(dirA, 'corrections/sales.csv');
    expect(fix).toHaveLength(p.rows_true);
    expect(new Set(fix.map((r) => r[2]))).toEqual(new Set([p.day]));
    expect(fix.reduce((a, r) => a + Number(r[3]), 0)).toBe(p.units_true);
    expect(faults.natural_low_volume_days).toEqual([]);
  });

  test('the totals match the files', () => {
    const t = faults.totals;
    const sales = rows(dirA, 'sales.csv');
    expect(t.files['sales.csv']).toEqual({
      lines: sales.length,
      units: sales.reduce((a, r) => a + Number(r[3]), 0),
    });
    const stored = seriesOf(dirA);
    let n = 0;
    let u = 0;
    for (const s of stored.values()) {
      n += s.size;
      for (const v of s.values()) u += v;
    }
    expect(t.tables.sales).toEqual({ rows: n, units: u });
    expect(t.tables.series.rows).toBe(stored.size);
    const prices = rows(dirA, 'prices.csv');
    expect(t.tables.prices).toEqual({
      rows: prices.length,
      price_cents: prices.reduce((a, r) => a + Math.round(Number(r[3]) * 100), 0),
    });
    for (const [f, table] of [
      ['items.csv', 'items'],
      ['stores.csv', 'stores'],
      ['calendar.csv', 'calendar_days'],
      ['events.csv', 'events'],
      ['benefit_days.csv', 'benefit_days'],
    ] as const) {
      expect(t.tables[table].rows).toBe(rows(dirA, f).length);
    }
    const p = faults.faults.find((f) => f.kind === 'partial-load');
    expect(t.after_corrections.sales.rows).toBe(n + (p?.rows_true ?? 0) - (p?.rows_written ?? 0));
    expect(t.after_corrections.items.rows).toBe(
      t.tables.items.rows + rows(dirA, 'corrections/items.csv').length,
    );
  });
});

describe('demand', () => {
  test('slow movers have mostly zero days; prelaunch zeros and delisted series exist', () => {
    const first = parseDay(SIZE.startDay) as number;
    let slow = 0;
    let slowZeroShare = 0;
    let launched = 0;
    let delisted = 0;
    for (const s of seriesOf(dirA).values()) {
      const vals = [...s.values()];
      const mean = vals.reduce((a, b) => a + b, 0) / vals.length;
      if (mean < 0.3) {
        slow++;
        slowZeroShare += vals.filter((v) => v === 0).length / vals.length;
      }
      const days = [...s.keys()].sort();
      expect(days[0]).toBe(SIZE.startDay); // every series starts on the first day (zeros before launch)
      const firstSale = days.find((d) => (s.get(d) ?? 0) > 0);
      if (firstSale && (parseDay(firstSale) as number) - first > 60) launched++;
      if ((parseDay(days[days.length - 1] as string) as number) < first + SIZE.days - 1) delisted++;
    }
    expect(slow).toBeGreaterThan(5);
    expect(slowZeroShare / slow).toBeGreaterThan(0.7);
    expect(launched).toBeGreaterThan(0);
    expect(delisted).toBeGreaterThan(0);
  });

  test('weekly pattern: Saturdays sell more than Tuesdays chain-wide', () => {
    const byWeekday = new Float64Array(8);
    const count = new Float64Array(8);
    for (const [, , day, units] of rows(dirA, 'sales.csv')) {
      const w = isoWeekday(parseDay(day as string) as number);
      byWeekday[w]! += Number(units);
      count[w]! += 1;
    }
    const sat = (byWeekday[6] as number) / (count[6] as number);
    const tue = (byWeekday[2] as number) / (count[2] as number);
    expect(sat / tue).toBeGreaterThan(1.15);
  });

  test('promotions lift units: promoted weeks sell more than regular weeks of the same series', () => {
    const prices = new Map<string, Array<[string, number]>>();
    for (const [i, s, w, p] of rows(dirA, 'prices.csv')) {
      const k = `${i}|${s}`;
      if (!prices.has(k)) prices.set(k, []);
      prices.get(k)?.push([w as string, Number(p)]);
    }
    const spiked = new Set(
      faults.faults.flatMap((f) =>
        f.kind === 'price-spike' ? [`${f.item_id}|${f.store_id}|${f.week_start}`] : [],
      ),
    );
    let promo = 0;
    let promoDays = 0;
    let reg = 0;
    let regDays = 0;
    for (const [k, s] of seriesOf(dirA)) {
      const weeks = prices.get(k) ?? [];
      weeks.forEach(([w, p], j) => {
        if (spiked.has(`${k}|${w}`)) return;
        const around = weeks.slice(Math.max(0, j - 4), j + 5).map((x) => x[1]);
        const regular = Math.max(...around);
        const d0 = parseDay(w) as number;
        let units = 0;
        let n = 0;
        for (let d = 0; d < 7; d++) {
          const v = s.get(formatDay(d0 + d));
          if (v === undefined) continue;
          units += v;
          n++;
        }
        if (p < regular * 0.9) {
          promo += units;
          promoDays += n;
        } else if (p === regular) {
          reg += units;
          regDays += n;
        }
      });
    }
    expect(promoDays).toBeGreaterThan(100);
    expect(promo / promoDays / (reg / regDays)).toBeGreaterThan(1.2);
  });

  test('events and benefit days are in their files', () => {
    const events = rows(dirA, 'events.csv');
    const names = new Set(events.map((e) => e[1]));
    expect(names.size).toBeGreaterThan(8);
    expect(new Set(events.map((e) => e[2]))).toEqual(
      new Set(['holiday', 'sporting', 'cultural', 'religious']),
    );
    const perDay = new Map<string, number>();
    for (const e of events) perDay.set(e[0] as string, (perDay.get(e[0] as string) ?? 0) + 1);
    expect(Math.max(...perDay.values())).toBeGreaterThanOrEqual(2); // several events on one day
    const benefit = rows(dirA, 'benefit_days.csv');
    const regions = new Set(rows(dirA, 'stores.csv').map((r) => r[1]));
    expect(new Set(benefit.map((b) => b[0]))).toEqual(regions);
  });
});
