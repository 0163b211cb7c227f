import { expect, test } from 'vitest';
import { scheduleSchema } from '../../src/jobs/pipeline-config.js';
import { firesBetween, nextFire } from '../../src/jobs/scheduler.js';

const sched = (cron: string, timezone?: string) =>
  scheduleSchema.parse({ name: 'nightly', cron, ...(timezone ? { timezone } : {}) });

test('a daily 02:00 schedule fires once a day at 02:00 (POSIX cron field order: minute hour day month weekday)', () => {
  const fires = firesBetween(
    sched('0 2 * * *', 'UTC'),
    new Date('2024-03-01T00:00:00Z'),
    new Date('2024-03-04T03:00:00Z'),
  );
  expect(fires.map((d) => d.toISOString())).toEqual([
    '2024-03-01T02:00:00.000Z',
    '2024-03-02T02:00:00.000Z',
    '2024-03-03T02:00:00.000Z',
    '2024-03-04T02:00:00.000Z',
  ]);
});

test('the time zone is honoured across a daylight-saving change', () => {
  // EU summer time starts at 01:00 UTC on the last Sunday of March (Directive 2000/84/EC):
  // 2024-03-31. Lisbon is UTC+0 before and UTC+1 after, so 02:00 local moves from 02:00 to 01:00 UTC.
  const s = sched('0 2 * * *', 'Europe/Lisbon');
  expect(nextFire(s, new Date('2024-03-29T12:00:00Z'))?.toISOString()).toBe('2024-03-30T02:00:00.000Z');
  expect(nextFire(s, new Date('2024-03-31T12:00:00Z'))?.toISOString()).toBe('2024-04-01T01:00:00.000Z');
});

test('firesBetween keeps the newest firings when cut at the limit, and excludes the start instant', () => {
  const s = sched('*/10 * * * *', 'UTC');
  const from = new Date('2024-05-01T11:00:00Z');
  const all = firesBetween(s, from, new Date('2024-05-01T12:05:00Z'));
  expect(all).toHaveLength(6);
  expect(all[0]!.toISOString()).toBe('2024-05-01T11:10:00.000Z');
  const cut = firesBetween(s, from, new Date('2024-05-01T12:05:00Z'), 2);
  expect(cut.map((d) => d.toISOString())).toEqual(['2024-05-01T11:50:00.000Z', '2024-05-01T12:00:00.000Z']);
});

test('bad schedules are refused naming the key', () => {
  const r = scheduleSchema.safeParse({ name: 'x', cron: '61 * * * *', timezone: 'Mars/Olympus' });
  expect(r.success).toBe(false);
  const paths = r.error!.issues.map((i) => i.path.join('.'));
  expect(paths).toEqual(expect.arrayContaining(['cron', 'timezone']));
});
