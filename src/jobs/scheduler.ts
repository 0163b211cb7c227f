import { Cron } from 'croner';
import type { DbSession } from '../db/database.js';
import type { ScheduleConfig } from './pipeline-config.js';
import type { Reporter } from './progress.js';

/** One firing of a schedule. */
export interface Fire {
  readonly schedule: ScheduleConfig;
  readonly at: Date;
}

/** The trigger recorded on a schedule's runs. */
export const scheduleTrigger = (name: string) => `schedule:${name}`;

function cronOf(s: ScheduleConfig): Cron {
  return new Cron(s.cron, { paused: true, ...(s.timezone ? { timezone: s.timezone } : {}) });
}

/** The schedule's next firing strictly after `after`, or null if it never fires again. */
export function nextFire(s: ScheduleConfig, after: Date): Date | null {
  const c = cronOf(s);
  try {
    return c.nextRun(after);
  } finally {
    c.stop();
  }
}

/** Firings in `(after, until]`, oldest first, at most `limit` (the newest are kept when cut). */
export function firesBetween(s: ScheduleConfig, after: Date, until: Date, limit = 1000): Date[] {
  const out: Date[] = [];
  const c = cronOf(s);
  try {
    for (let t = c.nextRun(after); t && t.getTime() <= until.getTime(); t = c.nextRun(t)) {
      out.push(t);
      if (out.length > limit) out.shift();
    }
  } finally {
    c.stop();
  }
  return out;
}

/** When the schedule last fired a run that was recorded, from the runs table. */
export async function lastRecordedFire(db: DbSession, name: string): Promise<Date | null> {
  const res = await db.query<{ at: Date | null }>(
    'SELECT max(scheduled_for) AS at FROM runs WHERE trigger = $1',
    [scheduleTrigger(name)],
  );
  return res.rows[0]?.at ?? null;
}

export interface SchedulerOptions {
  readonly db: DbSession;
  readonly schedules: readonly ScheduleConfig[];
  /** Run the firings missed while no scheduler was running (since each schedule's last run). */
  readonly catchUp: boolean;
  /** The most missed firings caught up per schedule; older ones are reported and dropped. */
  readonly catchUpLimit?: number;
  /** Aborted by SIGTERM: the run in progress finishes its step, then the loop returns. */
  readonly signal: AbortSignal;
  readonly reporter: Reporter;
  /** Executes one firing (a pipeline run); errors are reported and the loop goes on. */
  execute(fire: Fire): Promise<void>;
  readonly now?: () => Date;
}

/**
 * Runs the configured schedules one firing at a time, in time order. A firing that comes due
 * while a run is still going is missed (cron's usual rule: runs never overlap); missed
 * firings, from downtime or from a long run, are run later only with `catchUp`.
 */
export async function runScheduler(opts: SchedulerOptions): Promise<void> {
  const now = opts.now ?? (() => new Date());
  const limit = opts.catchUpLimit ?? 100;
  const started = now();
  // Per schedule, the instant after which the next firing is looked for.
  const cursor = new Map<string, Date>();
  const due: Fire[] = [];
  for (const s of opts.schedules) {
    const last = await lastRecordedFire(opts.db, s.name);
    if (last && last.getTime() < started.getTime()) {
      const missed = firesBetween(s, last, started, Number.MAX_SAFE_INTEGER);
      if (missed.length && opts.catchUp) {
        const kept = missed.slice(-limit);
        if (kept.length < missed.length) {
          opts.reporter.warn(
            `schedule ${s.name}: ${missed.length - kept.length} older missed firings dropped`,
            {
              schedule: s.name,
            },
          );
        }
        opts.reporter.info(`schedule ${s.name}: catching up ${kept.length} missed firing(s)`, {
          schedule: s.name,
        });
        due.push(...kept.map((at) => ({ schedule: s, at })));
      } else if (missed.length) {
        opts.reporter.warn(
          `schedule ${s.name}: ${missed.length} firing(s) missed since ${last.toISOString()} ` +
            `(the last at ${missed.at(-1)!.toISOString()}); not run (use --catch-up)`,
          { schedule: s.name, missed: missed.length },
        );
      }
    }
    cursor.set(s.name, started);
  }
  due.sort((a, b) => a.at.getTime() - b.at.getTime());
  for (const fire of due) {
    if (opts.signal.aborted) return;
    await execute(opts, fire);
  }

  while (!opts.signal.aborted) {
    let next: Fire | undefined;
    for (const s of opts.schedules) {
      const at = nextFire(s, cursor.get(s.name)!);
      if (at && (!next || at.getTime() < next.at.getTime())) next = { schedule: s, at };
    }
    if (!next) {
      opts.reporter.info('no schedule fires again; stopping');
      return;
    }
    opts.reporter.info(`next: ${next.schedule.name} at ${next.at.toISOString()}`, {
      schedule: next.schedule.name,
    });
    await sleepUntil(next.at, opts.signal, now);
    if (opts.signal.aborted) return;
    await execute(opts, next);
    cursor.set(next.schedule.name, next.at);
    // Firings that came due during the run: missed unless catching up.
    const t = now();
    for (const s of opts.schedules) {
      const from = cursor.get(s.name)!;
      const missed = firesBetween(s, from, t, limit);
      if (missed.length === 0) continue;
      if (opts.catchUp) {
        for (const at of missed) {
          if (opts.signal.aborted) return;
          await execute(opts, { schedule: s, at });
        }
        cursor.set(s.name, missed.at(-1)!);
      } else {
        opts.reporter.warn(`schedule ${s.name}: ${missed.length} firing(s) came due during a run; skipped`, {
          schedule: s.name,
        });
        cursor.set(s.name, t);
      }
    }
  }
}

async function execute(opts: SchedulerOptions, fire: Fire): Promise<void> {
  try {
    await opts.execute(fire);
  } catch (err) {
    opts.reporter.error(
      `schedule ${fire.schedule.name} at ${fire.at.toISOString()}: ${(err as Error).message}`,
      {
        schedule: fire.schedule.name,
      },
    );
  }
}

/** Sleeps until `at` in slices of at most a minute (timers cap at 24.8 days; clocks jump). */
async function sleepUntil(at: Date, signal: AbortSignal, now: () => Date): Promise<void> {
  while (!signal.aborted) {
    const left = at.getTime() - now().getTime();
    if (left <= 0) return;
    await new Promise<void>((resolve) => {
      const done = () => {
        clearTimeout(t);
        signal.removeEventListener('abort', done);
        resolve();
      };
      const t = setTimeout(done, Math.min(left, 60_000));
      signal.addEventListener('abort', done, { once: true });
    });
  }
}
