import { Writable } from 'node:stream';
import { expect, test } from 'vitest';
import {
  clock,
  compactNumber,
  createReporter,
  progressFigures,
  progressLine,
} from '../../src/jobs/progress.js';

test('rate and ETA: 3 of 10 partitions and 1.5M rows after 30 s -> 50k rows/s, 70 s left', () => {
  // Hand arithmetic: 1.5e6 / 30 = 50,000 rows/s; 30 s / 3 partitions x 7 left = 70 s.
  const p = { label: 'build demo', done: 3, total: 10, rows: 1_500_000, startedAt: 0 };
  const f = progressFigures(p, 30_000);
  expect(f.rate).toBe(50_000);
  expect(f.etaSeconds).toBe(70);
  const line = progressLine(p, 30_000, 120);
  expect(line).toContain('3/10 partitions');
  expect(line).toContain('1.5M rows');
  expect(line).toContain('50k rows/s');
  expect(line).toContain('ETA 1:10');
});

test('number and clock formatting', () => {
  expect(compactNumber(999)).toBe('999');
  expect(compactNumber(1234)).toBe('1.23k');
  expect(compactNumber(57_000_000)).toBe('57M');
  expect(clock(3725)).toBe('1:02:05');
  expect(clock(Number.NaN)).toBe('--:--');
});

test('off a terminal, events and progress are JSON lines', async () => {
  const chunks: string[] = [];
  const stream = new Writable({
    write(c, _e, cb) {
      chunks.push(String(c));
      cb();
    },
  });
  const r = createReporter({ tty: false, stream, base: { runId: 7 }, progressEveryMs: 0 });
  r.info('run 7 started', { cutoff: '2024-05-01' });
  r.progress({ label: 'build demo', done: 1, total: 2, rows: 10, startedAt: Date.now() - 1000 });
  await new Promise((res) => setImmediate(res));
  const lines = chunks
    .join('')
    .trim()
    .split('\n')
    .map((l) => JSON.parse(l) as Record<string, unknown>);
  expect(lines[0]).toMatchObject({ msg: 'run 7 started', cutoff: '2024-05-01', runId: 7, level: 30 });
  expect(lines[1]).toMatchObject({ msg: 'progress', partitionsDone: 1, partitions: 2, rows: 10 });
});
