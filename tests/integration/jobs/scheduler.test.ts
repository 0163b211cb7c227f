import { expect, test } from 'vitest';
import { scheduleSchema } from '../../../src/jobs/pipeline-config.js';
import type { Reporter } from '../../../src/jobs/progress.js';
import { createRun } from '../../../src/jobs/run-store.js';
import { type Fire, runScheduler, scheduleTrigger } from '../../../src/jobs/scheduler.js';
import { useTestDb } from '../../helpers/db.js';

const t = useTestDb(import.meta.url);

function collecting(): Reporter & { lines: string[] } {
  const lines: string[] = [];
  return {
    lines,
    info: (m) => lines.push(`info ${m}`),
    warn: (m) => lines.push(`warn ${m}`),
    error: (m) => lines.push(`error ${m}`),
    progress: () => {},
    endProgress: () => {},
  };
}

const every10 = scheduleSchema.parse({ name: 'tenmin', cron: '*/10 * * * *', timezone: 'UTC' });
const NOW = new Date('2024-05-01T12:05:00Z');

async function recordFire(at: Date) {
  await createRun(t().db, {
    cutoff: '2024-04-30',
    sets: ['s'],
    trigger: scheduleTrigger('tenmin'),
    scheduledFor: at,
    inputs: {},
    forced: false,
    holder: { pid: 1, host: 'h', app: 'a' },
    status: 'skipped',
  });
}

test('missed firings since the last recorded run are only reported without --catch-up', async () => {
  await t().db.exec('TRUNCATE runs CASCADE');
  await recordFire(new Date('2024-05-01T11:00:00Z'));
  const reporter = collecting();
  const ran: Fire[] = [];
  const ac = new AbortController();
  // The loop would then sleep until 12:10; the reporter stops it when it announces that firing.
  const stopping: Reporter = {
    ...reporter,
    info: (m) => {
      reporter.info(m);
      if (m.startsWith('next:')) ac.abort();
    },
  };
  await runScheduler({
    db: t().db,
    schedules: [every10],
    catchUp: false,
    signal: ac.signal,
    reporter: stopping,
    now: () => NOW,
    execute: async (f) => void ran.push(f),
  });
  expect(ran).toEqual([]);
  expect(reporter.lines.some((l) => l.startsWith('warn schedule tenmin: 6 firing(s) missed'))).toBe(true);
}, 10_000);

test('with --catch-up each missed firing runs, oldest first, with its own fire time', async () => {
  await t().db.exec('TRUNCATE runs CASCADE');
  await recordFire(new Date('2024-05-01T11:00:00Z'));
  const ran: string[] = [];
  const ac = new AbortController();
  await runScheduler({
    db: t().db,
    schedules: [every10],
    catchUp: true,
    signal: ac.signal,
    reporter: collecting(),
    now: () => NOW,
    execute: async (f) => {
      ran.push(f.at.toISOString());
      if (ran.length === 6) ac.abort();
    },
  });
  expect(ran).toEqual(
    ['11:10', '11:20', '11:30', '11:40', '11:50', '12:00'].map((h) => `2024-05-01T${h}:00.000Z`),
  );
});
