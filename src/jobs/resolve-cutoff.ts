import { day, formatDay } from '../core/days.js';
import type { DbSession } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import type { CutoffSpec } from './pipeline-config.js';

/** The calendar day of an instant in a time zone (the host's when none is given), as `YYYY-MM-DD`. */
export function dayInZone(at: Date, timeZone?: string): string {
  // en-CA formats as YYYY-MM-DD.
  const f = new Intl.DateTimeFormat('en-CA', {
    ...(timeZone ? { timeZone } : {}),
    year: 'numeric',
    month: '2-digit',
    day: '2-digit',
  });
  return f.format(at);
}

/**
 * Turns a cutoff spec into a day. `yesterday` and `today` are read on the run's clock (a
 * schedule's fire time in its zone), `latest` is the newest stored sales day.
 */
export function resolveCutoffSpec(
  spec: CutoffSpec | string,
  opts: { now: Date; timeZone?: string | undefined; latestSalesDay: string | null },
): string {
  if (spec === 'latest') {
    if (!opts.latestSalesDay) throw new UsageError(`--cutoff latest: no sales are loaded yet`);
    return opts.latestSalesDay;
  }
  if (spec === 'today') return dayInZone(opts.now, opts.timeZone);
  if (spec === 'yesterday') return formatDay(day(dayInZone(opts.now, opts.timeZone)) - 1);
  try {
    return formatDay(day(spec));
  } catch (err) {
    throw new UsageError(
      `--cutoff: ${(err as Error).message}; expected a day, 'latest', 'yesterday' or 'today'`,
    );
  }
}

export async function latestSalesDay(db: DbSession): Promise<string | null> {
  // The sales key is (series_id, day), so a plain max(day) reads the whole table; one backward
  // index probe per series finds the same day in milliseconds.
  const res = await db.query<{ d: string | null }>(
    `SELECT max(x.d) AS d FROM series s
     CROSS JOIN LATERAL (SELECT max(day) AS d FROM sales WHERE series_id = s.series_id) x`,
  );
  return res.rows[0]?.d ?? null;
}
