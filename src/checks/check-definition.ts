import { z } from 'zod';
import type { Db } from '../db/database.js';
import { type FindingCode, type FindingDraft, type Severity, severitySchema } from './finding.js';
import type { PricePassResult, PriceVisitor } from './price-pass.js';
import type { SalesPassResult, SeriesVisitor } from './sales-pass.js';

/** The shared streaming passes a check may read. */
export type PassName = 'sales' | 'prices';

/** Columns a set-based check may fill when it inserts findings with `insertFrom`. */
export type FindingColumn =
  | 'series_id'
  | 'item_id'
  | 'store_id'
  | 'region_id'
  | 'first_day'
  | 'last_day'
  | 'week_start'
  | 'detectable_day'
  | 'observed'
  | 'threshold'
  | 'rank'
  | 'message'
  | 'details';

/** What a check gets while it runs. Days are epoch days. */
export interface CheckContext<P> {
  readonly runId: number;
  readonly check: string;
  /** Parameters validated by the check's schema, defaults applied. */
  readonly params: P;
  /** The last day of data considered, or null for everything stored. */
  readonly cutoff: number | null;
  /** Scheduled runs (the job runner) may judge harder, e.g. stale data blocks. */
  readonly scheduled: boolean;
  /** The run's calendar day (UTC), for freshness and waiver expiry. */
  readonly today: number;
  /** First day of the retail week, 0 = Sunday ... 6 = Saturday. */
  readonly weekStartsOn: number;
  /** The retail week's first day for an epoch day. */
  weekStart(day: number): number;
  /** The configured severity of one of this check's codes. */
  severity(code: FindingCode): Severity;
  /** Joins the shared sales pass; resolves with chain totals once it has streamed every series. */
  sales(visitor?: SeriesVisitor): Promise<SalesPassResult>;
  /** Joins the shared prices pass (which runs before the sales pass). */
  prices(visitor?: PriceVisitor): Promise<PricePassResult>;
  /**
   * Stores findings as rows of the run's one binary COPY (visible once every check has finished);
   * item, store and region are filled from series_id.
   */
  write(drafts: Iterable<FindingDraft>): Promise<number>;
  /**
   * Stores the rows of a SELECT as findings of `code`: `select` returns the named columns (days
   * as date, details as jsonb) and may use `$1..$n` from `params`.
   */
  insertFrom(
    code: FindingCode,
    columns: readonly FindingColumn[],
    select: string,
    params?: readonly unknown[],
  ): Promise<number>;
}

/** One data-quality rule: a file in src/checks and a line in the registry. */
export interface CheckDefinition<S extends z.ZodType<CommonParams> = z.ZodType<CommonParams>> {
  readonly name: string;
  readonly description: string;
  /** Every code the check can emit, with its default severity. */
  readonly codes: Readonly<
    Partial<Record<FindingCode, { readonly severity: Severity; readonly meaning: string }>>
  >;
  /** Thresholds, `enabled` and `severity`, with defaults; validated from the config file. */
  readonly params: S;
  /** Shared passes the check subscribes to. */
  readonly reads: readonly PassName[];
  run(db: Db, ctx: CheckContext<z.output<S>>): Promise<void>;
}

/** Any check, whatever its parameters. */
export type AnyCheck = CheckDefinition<z.ZodType<CommonParams>>;

export interface CommonParams {
  readonly enabled: boolean;
  readonly severity?: Severity | Readonly<Partial<Record<string, Severity>>> | undefined;
}

/** Freezes a definition so a registry entry cannot be changed at run time. */
export function defineCheck<S extends z.ZodType<CommonParams>>(def: CheckDefinition<S>): CheckDefinition<S> {
  return Object.freeze(def);
}

/**
 * The parameter schema of a check: `enabled`, `severity` (one level for every code, or one per
 * code) and the check's own thresholds. Unknown keys are refused so a typo is not ignored.
 */
export function checkParams<const C extends readonly [string, ...string[]], T extends z.ZodRawShape>(
  codes: C,
  shape: T,
) {
  const perCode = z.partialRecord(z.enum(codes), severitySchema);
  return z
    .object({
      enabled: z.boolean({ error: 'expected true or false' }).default(true),
      severity: z
        .union([severitySchema, perCode], {
          error: `expected 'block', 'warn', 'info' or an object of codes (${codes.join(', ')}) to severities`,
        })
        .optional(),
      ...shape,
    })
    .strict();
}

/** A number > 0 with a clear message. */
export const positiveNumber = (def: number) =>
  z.number({ error: 'expected a number > 0' }).positive({ error: 'expected a number > 0' }).default(def);

/** A probability strictly between 0 and 1. */
export const probability = (def: number) =>
  z
    .number({ error: 'expected a number between 0 and 1 (exclusive)' })
    .gt(0, { error: 'expected a number between 0 and 1 (exclusive)' })
    .lt(1, { error: 'expected a number between 0 and 1 (exclusive)' })
    .default(def);

/** An integer >= min. */
export const intAtLeast = (min: number, def: number) =>
  z
    .number({ error: `expected an integer >= ${min}` })
    .int({ error: `expected an integer >= ${min}` })
    .min(min, { error: `expected an integer >= ${min}` })
    .default(def);

/** A share between 0 and 1 inclusive. */
export const share = (def: number) =>
  z
    .number({ error: 'expected a number between 0 and 1' })
    .min(0, { error: 'expected a number between 0 and 1' })
    .max(1, { error: 'expected a number between 0 and 1' })
    .default(def);
