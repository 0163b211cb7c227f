import { Cron } from 'croner';
import { z } from 'zod';

const ident = z.string().regex(/^[a-z][a-z0-9_]{0,62}$/, 'a name matching ^[a-z][a-z0-9_]{0,62}$');

/** `latest` (newest sales day), `yesterday` / `today` (of the run's clock), or an ISO day. */
export const cutoffSpecSchema = z
  .string()
  .regex(
    /^(latest|yesterday|today|\d{4}-\d{2}-\d{2})$/,
    "'latest', 'yesterday', 'today' or a day YYYY-MM-DD",
  );
export type CutoffSpec = z.infer<typeof cutoffSpecSchema>;

const cronSchema = z.string().superRefine((pattern, ctx) => {
  try {
    new Cron(pattern, { paused: true }).stop();
  } catch (err) {
    ctx.addIssue({ code: 'custom', message: `not a valid cron expression: ${(err as Error).message}` });
  }
});

const timezoneSchema = z.string().superRefine((tz, ctx) => {
  try {
    new Intl.DateTimeFormat('en', { timeZone: tz });
  } catch {
    ctx.addIssue({
      code: 'custom',
      message: `unknown time zone '${tz}' (an IANA name such as Europe/Lisbon)`,
    });
  }
});

export const scheduleSchema = z
  .object({
    name: ident,
    cron: cronSchema.describe("five or six fields, e.g. '0 2 * * *' for 02:00 every day"),
    timezone: timezoneSchema.optional(),
    cutoff: cutoffSpecSchema.default('yesterday'),
    sets: z.array(ident).min(1).optional(),
  })
  .strict();
export type ScheduleConfig = z.infer<typeof scheduleSchema>;

export const watchSchema = z
  .object({
    dir: z.string().min(1),
    /** Which raw table a file feeds, by file name (extension .csv, .csv.gz, .tsv, .txt ignored). */
    targets: z
      .record(
        z.string(),
        z.enum(['items', 'stores', 'sales', 'prices', 'calendar', 'events', 'benefit_days']),
      )
      .optional(),
    mode: z.enum(['append', 'replace']).default('append'),
    layout: z.enum(['long', 'wide']).optional(),
  })
  .strict();
export type WatchConfig = z.infer<typeof watchSchema>;

export const workersSchema = z
  .object({
    concurrency: z.number().int().min(1).max(64).default(2),
    heartbeatSeconds: z.number().min(0.1).max(3600).default(5),
    timeoutSeconds: z.number().min(0.5).max(86_400).default(60),
    pollSeconds: z.number().min(0.05).max(60).default(1),
    maxAttempts: z.number().int().min(1).max(100).default(3),
  })
  .strict()
  .superRefine((w, ctx) => {
    if (w.timeoutSeconds <= w.heartbeatSeconds * 2) {
      ctx.addIssue({
        code: 'custom',
        path: ['timeoutSeconds'],
        message: `must exceed twice heartbeatSeconds (${w.heartbeatSeconds}), or a live worker loses its item`,
      });
    }
  });

export const pipelineSectionSchema = z
  .object({
    sets: z.array(ident).min(1).optional().describe('feature sets a run refreshes (default: every set)'),
    watch: watchSchema.optional(),
    steps: z
      .object({
        audit: z
          .object({ sample: z.number().int().min(1).default(20) })
          .strict()
          .optional(),
        export: z
          .object({
            dir: z.string().min(1).default('exports'),
            format: z.enum(['parquet', 'csv']).default('parquet'),
          })
          .strict()
          .optional(),
        publish: z.boolean().default(true),
      })
      .strict()
      .prefault({}),
    schedules: z.array(scheduleSchema).default([]),
    workers: workersSchema.prefault({}),
    freshness: z
      .object({
        maxLagDays: z
          .number()
          .int()
          .min(0)
          .default(0)
          .describe('sales are fresh for cutoff C when the newest sales day is on or after C - maxLagDays'),
        waitMinutes: z
          .number()
          .min(0)
          .max(24 * 60)
          .default(0)
          .describe(
            'while sales are not fresh, look in the watched folder again for this long before checking',
          ),
        pollMinutes: z.number().min(0.01).max(60).default(5),
      })
      .strict()
      .prefault({}),
    incremental: z
      .boolean()
      .default(true)
      .describe('refresh from the previous cutoff when only new days came'),
  })
  .strict()
  .superRefine((p, ctx) => {
    const seen = new Set<string>();
    p.schedules.forEach((s, i) => {
      if (seen.has(s.name))
        ctx.addIssue({ code: 'custom', path: ['schedules', i, 'name'], message: 'duplicate' });
      seen.add(s.name);
    });
  })
  .prefault({});

export type PipelineConfig = z.infer<typeof pipelineSectionSchema>;
