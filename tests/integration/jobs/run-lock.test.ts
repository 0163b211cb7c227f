import { expect, test } from 'vitest';
import { parseConfig } from '../../../src/config/config.js';
import { openJobDatabase } from '../../../src/jobs/job-database.js';
import { LockLostError, RunBusyError, runLockKey, withRunLocks } from '../../../src/jobs/run-lock.js';
import { useTestDb } from '../../helpers/db.js';
import { databaseUrl } from '../../helpers/servers.js';

const t = useTestDb(import.meta.url);

async function lockDb(app: string) {
  const config = parseConfig({ database: { url: await databaseUrl(), schema: t().schema } }, 'test');
  return openJobDatabase(config, app, { poolSize: 1, migrate: false });
}

test('a second holder gives up at once without waiting, naming the backend that holds the lock', async () => {
  const a = await lockDb('larder run 111@host-a');
  const b = await lockDb('larder run 222@host-b');
  const key = runLockKey(t().schema, 'demo', '2024-05-01');
  try {
    await withRunLocks(a, [key], { wait: false }, async () => {
      const err = await withRunLocks(b, [key], { wait: false }, async () => 'should not run').catch(
        (e: unknown) => e,
      );
      expect(err).toBeInstanceOf(RunBusyError);
      expect((err as RunBusyError).message).toContain("'larder run 111@host-a'");
      expect((err as RunBusyError).message).toContain('demo 2024-05-01');
    });
  } finally {
    await a.close();
    await b.close();
  }
});

test('a waiting holder is told who holds the lock and gets it when the first lets go', async () => {
  const a = await lockDb('larder run 333@host-a');
  const b = await lockDb('larder run 444@host-b');
  const keys = [runLockKey(t().schema, 'x', '2024-05-01'), runLockKey(t().schema, 'y', '2024-05-01')];
  const order: string[] = [];
  try {
    let release!: () => void;
    const first = withRunLocks(a, keys, { wait: false }, async () => {
      order.push('a in');
      await new Promise<void>((r) => (release = r));
      order.push('a out');
    });
    await new Promise((r) => setTimeout(r, 100));
    const second = withRunLocks(
      b,
      [...keys].reverse(),
      {
        wait: true,
        onWait: (holders) => {
          order.push(`b waits for ${holders.map((h) => h.applicationName).join()}`);
          setTimeout(release, 200);
        },
      },
      async () => void order.push('b in'),
    );
    await Promise.all([first, second]);
    expect(order).toEqual(['a in', 'b waits for larder run 333@host-a', 'a out', 'b in']);
  } finally {
    await a.close();
    await b.close();
  }
});

test('terminating the lock backend aborts the holder with LockLostError', async () => {
  const a = await lockDb('larder run 555@host-a');
  const key = runLockKey(t().schema, 'lost', '2024-05-01');
  try {
    const reason = await withRunLocks(a, [key], { wait: false, probeMs: 50 }, async ({ signal }) => {
      await t().db.query(
        `SELECT pg_terminate_backend(pid) FROM pg_stat_activity WHERE application_name = $1`,
        ['larder run 555@host-a'],
      );
      await new Promise<void>((r) => signal.addEventListener('abort', () => r(), { once: true }));
      return signal.reason as unknown;
    });
    expect(reason).toBeInstanceOf(LockLostError);
  } finally {
    await a.close();
  }
});
