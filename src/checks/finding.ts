import { z } from 'zod';

/** How much a finding matters: `block` stops a build, `warn` and `info` are reported only. */
export const severitySchema = z.enum(['block', 'warn', 'info'], {
  error: "expected 'block', 'warn' or 'info'",
});
export type Severity = z.infer<typeof severitySchema>;

export const SEVERITY_ORDER: Readonly<Record<Severity, number>> = Object.freeze({
  block: 0,
  warn: 1,
  info: 2,
});

/**
 * What each finding code carries in `details`, keyed by code. A finding is data, not an error:
 * the keys, the days, the observed value and the threshold it was held against.
 */
export interface FindingDetails {
  'duplicate-row': { file: string; line: number; other_line: number; key: string | null; batch_id: number };
  'duplicate-key': { table: string; key: Record<string, string | null>; copies: number };
  'unknown-item': ReferenceDetails;
  'unknown-store': ReferenceDetails;
  'unknown-region': ReferenceDetails;
  'store-without-region': Record<string, never>;
  'item-without-dept': Record<string, never>;
  'item-without-category': Record<string, never>;
  'calendar-missing-days': { days: number };
  'event-outside-calendar': { names: string[] };
  'benefit-day-outside-calendar': { regions: string[] };
  'series-gaps': {
    missing_days: number;
    gaps: number;
    longest: number;
    span_days: number;
    /** The first missing days (up to 10). */
    days: string[];
    /** Missing days left out because most series lack them too (see chain-missing-days). */
    chain_days_excluded: number;
  };
  'chain-missing-days': { series_missing: number; active_series: number };
  stockout: StockoutDetails;
  'open-zero-run': StockoutDetails;
  'pre-launch': { zero_days: number; first_sale: string };
  'never-sold': { days: number };
  'price-spike': { price: number; median: number; mad: number; ratio: number; history_weeks: number };
  'non-positive-price': { price: number };
  'week-misaligned': { weeks: number; weekday: string };
  'missing-price': { weeks: number; sold_weeks: number };
  'negative-units': { days: number; min_units: number };
  'units-spike': { units: number; median: number; mad: number };
  stale: { newest_day: string | null; expected_cutoff: string; lag_days: number };
  'no-sales': Record<string, never>;
  'volume-drop': { median: number; ratio: number; weeks: number; events: string[] };
  'price-coverage': { unpriced_weeks: number; sold_weeks: number; scope: 'chain' | 'store' };
  'check-failed': { error: string };
}

export type FindingCode = keyof FindingDetails;

/** Where an unknown key was used: series count for sales, row count for prices and benefit days. */
export interface ReferenceDetails {
  table: 'sales' | 'prices' | 'benefit_days';
  series: number | null;
  rows: number | null;
}

export interface StockoutDetails {
  length: number;
  mean: number;
  variance: number;
  p0: number;
  k_star: number;
  model: 'negative-binomial' | 'poisson';
}

/** The columns every finding has; days are ISO 8601 text, absent keys null. */
export interface FindingFields {
  readonly findingId: number;
  readonly runId: number;
  readonly check: string;
  readonly severity: Severity;
  readonly seriesId: number | null;
  readonly itemId: string | null;
  readonly storeId: string | null;
  readonly regionId: string | null;
  readonly firstDay: string | null;
  readonly lastDay: string | null;
  readonly weekStart: string | null;
  readonly detectableDay: string | null;
  readonly observed: number | null;
  readonly threshold: number | null;
  readonly rank: number | null;
  readonly message: string;
  readonly waivedBy: number | null;
}

/** A stored finding: a union keyed by `code`, each with its own `details`. */
export type Finding = {
  [C in FindingCode]: FindingFields & { readonly code: C; readonly details: FindingDetails[C] };
}[FindingCode];

/**
 * A finding as a check produces it, before it is stored: days as epoch days, severity filled in
 * from the check's configuration by the writer.
 */
export type FindingDraft = {
  [C in FindingCode]: {
    readonly code: C;
    readonly details: FindingDetails[C];
    readonly message: string;
    /** Overrides the code's configured severity (freshness judges scheduled runs harder). */
    readonly severity?: Severity;
    readonly seriesId?: number | null;
    readonly itemId?: string | null;
    readonly storeId?: string | null;
    readonly regionId?: string | null;
    readonly firstDay?: number | null;
    readonly lastDay?: number | null;
    readonly weekStart?: number | null;
    readonly detectableDay?: number | null;
    readonly observed?: number | null;
    readonly threshold?: number | null;
    readonly rank?: number | null;
  };
}[FindingCode];
