import { mkdir, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import { z } from 'zod';
import { DEFAULT_STOCKOUT_PARAMS } from '../checks/stockout-rule.js';
import { WEEKDAYS } from '../config/config.js';
import { formatDay, parseDay } from '../core/days.js';
import { UsageError } from '../db/errors.js';
import { buildCatalog, STREAM } from './chain-catalog.js';
import { csvField, writeStaticFiles } from './chain-files.js';
import { ChunkWriter } from './chunk-writer.js';
import { chainDays, seriesPrices, simulateSeries } from './demand-model.js';
import { planFaults } from './fault-plan.js';
import type { Fault, FaultsFile } from './faults-file.js';
import { Prng } from './prng.js';
import { applySeriesFaults } from './series-faults.js';

/** Defaults sized so the whole demo finishes in well under a minute on the embedded database. */
export const DEMO_DEFAULTS = Object.freeze({
  stores: 4,
  items: 60,
  days: 910,
  seed: 7,
  startDay: '2022-01-01',
  layout: 'long' as const,
  weekStartsOn: 'saturday' as const,
});

export const generateOptionsSchema = z.object({
  dir: z.string().min(1),
  stores: z.number().int().min(1).max(2000).default(DEMO_DEFAULTS.stores),
  items: z.number().int().min(4).max(200_000).default(DEMO_DEFAULTS.items),
  days: z.number().int().min(112, 'at least 112 days (16 weeks)').max(20_000).default(DEMO_DEFAULTS.days),
  seed: z.number().int().min(0).max(Number.MAX_SAFE_INTEGER).default(DEMO_DEFAULTS.seed),
  startDay: z
    .string()
    .refine((s) => parseDay(s) !== null, 'an ISO 8601 day (YYYY-MM-DD)')
    .default(DEMO_DEFAULTS.startDay),
  layout: z.enum(['long', 'wide']).default(DEMO_DEFAULTS.layout),
  weekStartsOn: z.enum(WEEKDAYS).default(DEMO_DEFAULTS.weekStartsOn),
});
export type GenerateOptions = z.input<typeof generateOptionsSchema>;

export interface GenerateResult {
  readonly dir: string;
  readonly faultsPath: string;
  readonly salesLines: number;
  readonly seconds: number;
  readonly rowsPerSecond: number;
  readonly faults: FaultsFile;
}

/** ISO weekday (1 = Monday) of a weekday name. */
const isoOf = (name: (typeof WEEKDAYS)[number]) => WEEKDAYS.indexOf(name) || 7;

/**
 * Generates the demo chain into `dir`: the raw CSVs, `faults.json` (ground truth and totals) and
 * `corrections/`. Series are generated and written one at a time, so memory stays bounded by a
 * series and the writers' chunks, whatever the size.
 */
export async function generateChain(
  options: GenerateOptions,
  onProgress?: (storesDone: number, stores: number, lines: number) => void,
): Promise<GenerateResult> {
  const parsed = generateOptionsSchema.safeParse(options);
  if (!parsed.success) {
    const i = parsed.error.issues[0];
    throw new UsageError(`demo chain: ${i?.path.join('.')}: ${i?.message}`);
  }
  const opt = parsed.data;
  const t0 = performance.now();
  const dir = opt.dir;
  await mkdir(join(dir, 'corrections'), { recursive: true });
  const first = parseDay(opt.startDay) as number;
  const n = opt.days;
  const alpha = DEFAULT_STOCKOUT_PARAMS.alpha;
  const catalog = buildCatalog(opt.seed, { stores: opt.stores, items: opt.items, days: n });
  const chain = chainDays(catalog, first, n, isoOf(opt.weekStartsOn));
  const plan = planFaults(opt.seed, catalog, chain);
  const statics = await writeStaticFiles(dir, catalog, chain, plan);

  const dayText = Array.from({ length: n }, (_, i) => formatDay(first + i));
  const weekText = chain.weekStarts.map(formatDay);
  const sales = new ChunkWriter(join(dir, 'sales.csv'));
  sales.line(opt.layout === 'long' ? 'item_id,store_id,day,units' : `item_id,store_id,${dayText.join(',')}`);
  const prices = new ChunkWriter(join(dir, 'prices.csv'));
  prices.line('item_id,store_id,week_start,price');
  const fixSales = new ChunkWriter(join(dir, 'corrections/sales.csv'));
  fixSales.line('item_id,store_id,day,units');

  const faults: Fault[] = [];
  const volume = new Float64Array(n);
  let lineUnits = 0;
  let storedRows = 0;
  let storedUnits = 0;
  let priceRows = 0;
  let priceCents = 0;
  let rejects = 0;
  let partialRowsTrue = 0;
  let partialUnitsTrue = 0;
  let partialRowsWritten = 0;
  const unknown = new Map<string, { rows: number; prices: number; units: number; firstSale: number }>();
  const deptIndex = new Map(catalog.departments.map((d, i) => [d, i]));
  const pd = plan.partialDay;

  for (const store of catalog.stores) {
    const sid = csvField(store.id);
    for (const item of catalog.items) {
      const key = store.index * catalog.items.length + item.index;
      const truePrices = seriesPrices(opt.seed, item, store, chain.weekStarts.length);
      const demandRng = new Prng(opt.seed, STREAM.demand, store.index, item.index);
      const demand = simulateSeries(
        chain,
        item,
        store,
        deptIndex.get(item.dept) as number,
        truePrices,
        demandRng,
      );
      const faultRng = new Prng(opt.seed, STREAM.faults, store.index, item.index);
      const f = applySeriesFaults(
        chain,
        plan,
        plan.series.get(key),
        item,
        store.id,
        demand,
        truePrices,
        faultRng,
        alpha,
      );
      const u = f.units;
      const prefix = `${csvField(item.id)},${sid},`;
      let rows = 0;
      let units = 0;
      let firstSale = -1;
      if (opt.layout === 'long') {
        let chunk = '';
        let dupAt = 0;
        for (let i = 0; i <= demand.end; i++) {
          const v = u[i] as number;
          if (Number.isNaN(v)) continue; // no row that day
          const line = `${prefix}${dayText[i]},${v}\n`;
          chunk += line;
          rows++;
          units += v;
          volume[i]! += v;
          if (firstSale < 0 && v > 0) firstSale = i;
          if (f.duplicateDays[dupAt] === i) {
            dupAt++;
            chunk += line;
            lineUnits += v;
            rejects++;
            const at = sales.lines + rows + dupAt - 1;
            faults.push({
              kind: 'duplicate-row',
              item_id: item.id,
              store_id: store.id,
              day: dayText[i] as string,
              units: v,
              lines: [at, at + 1],
              rows: 1,
            });
          }
        }
        sales.text(chunk, rows + dupAt);
      } else {
        const cells: string[] = new Array(n).fill('');
        for (let i = 0; i <= demand.end; i++) {
          const v = u[i] as number;
          if (Number.isNaN(v)) continue;
          cells[i] = String(v);
          rows++;
          units += v;
          volume[i]! += v;
          if (firstSale < 0 && v > 0) firstSale = i;
        }
        const line = prefix + cells.join(',');
        sales.line(line);
        if (f.duplicateDays.length > 0) {
          sales.line(line);
          lineUnits += units;
          rejects++; // the loader rejects the repeated line as one row
          const at = sales.lines - 1;
          faults.push({
            kind: 'duplicate-row',
            item_id: item.id,
            store_id: store.id,
            day: null,
            units: null,
            lines: [at, at + 1],
            rows,
          });
        }
      }
      lineUnits += units;
      storedRows += rows;
      storedUnits += units;

      const pt = f.partialTrue;
      if (!Number.isNaN(pt)) {
        partialRowsTrue++;
        partialUnitsTrue += pt;
        if (!f.partialDropped) partialRowsWritten++;
        fixSales.line(`${prefix}${dayText[pd]},${pt}`);
      }

      let pchunk = '';
      let prows = 0;
      for (let w = chain.week[demand.launch] as number; w <= (chain.week[demand.end] as number); w++) {
        const p = f.price[w] as number;
        pchunk += `${prefix}${weekText[w]},${p.toFixed(2)}\n`;
        priceCents += Math.round(p * 100);
        prows++;
      }
      prices.text(pchunk, prows);
      priceRows += prows;
      for (const r of f.records) faults.push(r);
      if (item.unknown) {
        const acc = unknown.get(item.id) ?? { rows: 0, prices: 0, units: 0, firstSale: -1 };
        acc.rows += rows;
        acc.prices += prows;
        acc.units += units;
        if (firstSale >= 0 && (acc.firstSale < 0 || firstSale < acc.firstSale)) acc.firstSale = firstSale;
        unknown.set(item.id, acc);
      }
      await Promise.all([sales.maybeFlush(), prices.maybeFlush(), fixSales.maybeFlush()]);
    }
    onProgress?.(store.index + 1, catalog.stores.length, sales.lines - 1);
  }
  await Promise.all([sales.close(), prices.close(), fixSales.close()]);

  // Chain-level faults, measured on what was written.
  const sameWeekdayMedian = (i: number) => {
    const prev = [7, 14, 21, 28].filter((k) => i - k >= 0).map((k) => volume[i - k] as number);
    prev.sort((a, b) => a - b);
    if (prev.length === 0) return Number.NaN;
    const mid = prev.length / 2;
    return prev.length % 2
      ? (prev[Math.floor(mid)] as number)
      : ((prev[mid - 1] as number) + (prev[mid] as number)) / 2;
  };
  const median = sameWeekdayMedian(pd);
  faults.push({
    kind: 'partial-load',
    day: dayText[pd] as string,
    rows_true: partialRowsTrue,
    rows_written: partialRowsWritten,
    units_true: partialUnitsTrue,
    units_written: volume[pd] as number,
    weekday_median: median,
    ratio: Math.round(((volume[pd] as number) / median) * 1e4) / 1e4,
  });
  faults.push({ kind: 'calendar-gap', day: dayText[plan.calendarGap] as string });
  for (const it of catalog.items) {
    const acc = unknown.get(it.id);
    if (!acc) continue;
    faults.push({
      kind: 'unknown-item',
      item_id: it.id,
      dept_id: it.dept,
      category_id: it.category,
      first_sale_day: acc.firstSale >= 0 ? (dayText[acc.firstSale] as string) : null,
      sales_rows: acc.rows,
      price_rows: acc.prices,
      units: acc.units,
    });
  }
  const lowDays: string[] = [];
  for (let i = 28; i < n; i++) {
    if (i !== pd && (volume[i] as number) < 0.5 * sameWeekdayMedian(i)) lowDays.push(dayText[i] as string);
  }

  // True prices of the spike weeks: the corrected price extract.
  const fixPrices = new ChunkWriter(join(dir, 'corrections/prices.csv'));
  fixPrices.line('item_id,store_id,week_start,price');
  let spikeCentsDelta = 0;
  for (const r of faults) {
    if (r.kind !== 'price-spike') continue;
    fixPrices.line(
      `${csvField(r.item_id)},${csvField(r.store_id)},${r.week_start},${r.true_price.toFixed(2)}`,
    );
    spikeCentsDelta += Math.round(r.true_price * 100) - Math.round(r.written_price * 100);
  }
  await fixPrices.close();

  const salesLines = sales.lines - 1;
  const counts: Record<string, number> = {};
  for (const r of faults) counts[r.kind] = (counts[r.kind] ?? 0) + 1;
  const seriesCount = catalog.stores.length * catalog.items.length;
  const tables = {
    items: { rows: statics.items },
    stores: { rows: statics.stores },
    series: { rows: seriesCount },
    sales: { rows: storedRows, units: storedUnits },
    prices: { rows: priceRows, price_cents: priceCents },
    calendar_days: { rows: statics.calendar },
    events: { rows: statics.events },
    benefit_days: { rows: statics.benefitDays },
  };
  const file: FaultsFile = {
    format: 'larder-demo-faults/1',
    generator: {
      seed: opt.seed,
      stores: opt.stores,
      items: opt.items,
      days: n,
      first_day: dayText[0] as string,
      last_day: dayText[n - 1] as string,
      layout: opt.layout,
      week_starts_on: opt.weekStartsOn,
      stockout_alpha: alpha,
    },
    files: {
      items: 'items.csv',
      stores: 'stores.csv',
      sales: 'sales.csv',
      prices: 'prices.csv',
      calendar: 'calendar.csv',
      events: 'events.csv',
      benefit_days: 'benefit_days.csv',
    },
    corrections: {
      sales: 'corrections/sales.csv',
      prices: 'corrections/prices.csv',
      calendar: 'corrections/calendar.csv',
      items: 'corrections/items.csv',
    },
    totals: {
      files: {
        'items.csv': { lines: statics.items },
        'stores.csv': { lines: statics.stores },
        'sales.csv': { lines: salesLines, units: lineUnits },
        'prices.csv': { lines: priceRows },
        'calendar.csv': { lines: statics.calendar },
        'events.csv': { lines: statics.events },
        'benefit_days.csv': { lines: statics.benefitDays },
        'corrections/sales.csv': { lines: partialRowsTrue, units: partialUnitsTrue },
        'corrections/prices.csv': { lines: counts['price-spike'] ?? 0 },
        'corrections/calendar.csv': { lines: 1 },
        'corrections/items.csv': { lines: statics.correctionItems },
      },
      tables,
      rejects: { sales: rejects },
      after_corrections: {
        ...tables,
        items: { rows: statics.items + statics.correctionItems },
        sales: {
          rows: storedRows + partialRowsTrue - partialRowsWritten,
          units: storedUnits + partialUnitsTrue - (volume[pd] as number),
        },
        prices: { rows: priceRows, price_cents: priceCents + spikeCentsDelta },
        calendar_days: { rows: statics.calendar + 1 },
      },
    },
    counts,
    faults,
    natural_low_volume_days: lowDays,
  };
  const faultsPath = join(dir, 'faults.json');
  await writeFile(faultsPath, `${JSON.stringify(file, null, 1)}\n`);
  const seconds = (performance.now() - t0) / 1000;
  return {
    dir,
    faultsPath,
    salesLines,
    seconds,
    rowsPerSecond: Math.round(salesLines / seconds),
    faults: file,
  };
}
