import { readFile } from 'node:fs/promises';
import { z } from 'zod';

/**
 * `faults.json`: the ground truth of what the generator injected, and its own totals, so
 * detection (precision, recall) and the load round trip can be measured against it. Days are
 * ISO 8601 text; line numbers count the header as line 1.
 */

const day = z.string().regex(/^\d{4}-\d{2}-\d{2}$/);
const ids = { item_id: z.string(), store_id: z.string() };

export const stockoutFaultSchema = z.object({
  kind: z.literal('stockout'),
  ...ids,
  first_day: day,
  last_day: day,
  length: z.number().int(),
  /** Demand the stock-out hid, day by day. */
  true_units: z.array(z.number().int()),
  placement: z.enum(['fast', 'slow']),
  /** Judged with the generator's own daily means: is the run improbable by the rule's alpha? */
  model: z.object({
    mean_rate: z.number(),
    mean_p0: z.number(),
    log10_run_probability: z.number(),
    k_star: z.number().nullable(),
    detectable: z.boolean(),
  }),
  /** The stock-out rule (src/checks/stockout-rule.ts) run on the series as written. */
  rule: z.object({
    kind: z.string(),
    run_first_day: day,
    run_last_day: day,
    p0: z.number().nullable(),
    k_star: z.number().nullable(),
    detectable_day: day.nullable(),
  }),
});

export const priceSpikeFaultSchema = z.object({
  kind: z.literal('price-spike'),
  ...ids,
  week_start: day,
  regular_price: z.number(),
  true_price: z.number(),
  written_price: z.number(),
  /** written / regular. */
  ratio: z.number(),
});

export const missingDaysFaultSchema = z.object({
  kind: z.literal('missing-days'),
  ...ids,
  days: z.array(day),
  true_units: z.array(z.number().int()),
});

export const duplicateRowFaultSchema = z.object({
  kind: z.literal('duplicate-row'),
  ...ids,
  /** The repeated day (long layout); null in the wide layout, where the whole series line repeats. */
  day: day.nullable(),
  units: z.number().int().nullable(),
  lines: z.tuple([z.number().int(), z.number().int()]),
  /** Sales rows the repeated line carries (1 in the long layout); the loader rejects the line. */
  rows: z.number().int(),
});

export const negativeUnitsFaultSchema = z.object({
  kind: z.literal('negative-units'),
  ...ids,
  day,
  units: z.number().int(),
});

export const unknownItemFaultSchema = z.object({
  kind: z.literal('unknown-item'),
  item_id: z.string(),
  dept_id: z.string(),
  category_id: z.string(),
  first_sale_day: day.nullable(),
  sales_rows: z.number().int(),
  price_rows: z.number().int(),
  units: z.number().int(),
});

export const calendarGapFaultSchema = z.object({ kind: z.literal('calendar-gap'), day });

export const partialLoadFaultSchema = z.object({
  kind: z.literal('partial-load'),
  day,
  rows_true: z.number().int(),
  rows_written: z.number().int(),
  units_true: z.number().int(),
  units_written: z.number().int(),
  /** Median chain units of the same weekday over the previous 4 weeks, as written. */
  weekday_median: z.number(),
  /** units_written / weekday_median: below 0.5 by construction. */
  ratio: z.number(),
});

export const faultSchema = z.discriminatedUnion('kind', [
  stockoutFaultSchema,
  priceSpikeFaultSchema,
  missingDaysFaultSchema,
  duplicateRowFaultSchema,
  negativeUnitsFaultSchema,
  unknownItemFaultSchema,
  calendarGapFaultSchema,
  partialLoadFaultSchema,
]);
export type Fault = z.infer<typeof faultSchema>;
export type FaultKind = Fault['kind'];
export type StockoutFault = z.infer<typeof stockoutFaultSchema>;

const tableTotals = z.object({ rows: z.number().int(), units: z.number().int().optional() });
export const TABLES = [
  'items',
  'stores',
  'series',
  'sales',
  'prices',
  'calendar_days',
  'events',
  'benefit_days',
] as const;
export type TableName = (typeof TABLES)[number];

const tablesSchema = z.object({
  items: tableTotals,
  stores: tableTotals,
  series: tableTotals,
  sales: tableTotals,
  prices: z.object({ rows: z.number().int(), price_cents: z.number().int() }),
  calendar_days: tableTotals,
  events: tableTotals,
  benefit_days: tableTotals,
});
export type TableTotals = z.infer<typeof tablesSchema>;

export const faultsFileSchema = z.object({
  format: z.literal('larder-demo-faults/1'),
  generator: z.object({
    seed: z.number().int(),
    stores: z.number().int(),
    items: z.number().int(),
    days: z.number().int(),
    first_day: day,
    last_day: day,
    layout: z.enum(['long', 'wide']),
    week_starts_on: z.string(),
    stockout_alpha: z.number(),
  }),
  /** File name per raw table, relative to the folder. */
  files: z.record(z.string(), z.string()),
  corrections: z.record(z.string(), z.string()),
  totals: z.object({
    /** Per written file: data lines (header excluded) and, for sales, the unit sum over lines. */
    files: z.record(z.string(), z.object({ lines: z.number().int(), units: z.number().int().optional() })),
    /** What the raw tables hold after loading every file (duplicates rejected). */
    tables: tablesSchema,
    /** Lines the loader must reject, per table (one per repeated line, in either layout). */
    rejects: z.record(z.string(), z.number().int()),
    /** The raw tables after loading corrections/ with mode replace on top. */
    after_corrections: tablesSchema,
  }),
  counts: z.record(z.string(), z.number().int()),
  faults: z.array(faultSchema),
  /** Chain days (other than the partial load) whose written volume is below half the weekday median. */
  natural_low_volume_days: z.array(day),
});
export type FaultsFile = z.infer<typeof faultsFileSchema>;

/** Reads and validates a generated `faults.json`. */
export async function readFaultsFile(path: string): Promise<FaultsFile> {
  let raw: unknown;
  try {
    raw = JSON.parse(await readFile(path, 'utf8'));
  } catch (err) {
    throw new Error(`cannot read ${path}: ${(err as Error).message}`, { cause: err });
  }
  const parsed = faultsFileSchema.safeParse(raw);
  if (!parsed.success) {
    const first = parsed.error.issues[0];
    throw new Error(`${path} is not a demo faults file: ${first?.path.join('.')}: ${first?.message}`);
  }
  return parsed.data;
}
