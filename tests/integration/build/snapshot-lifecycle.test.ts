import { describe, expect, test } from 'vitest';
import { planBuild } from '../../../src/build/build-plan.js';
import { buildPartition } from '../../../src/build/build-partition.js';
import { buildSnapshot } from '../../../src/build/build-snapshot.js';
import { abortBuild, finishBuild } from '../../../src/build/finish-build.js';
import { getSnapshot, listSnapshots, withSnapshot } from '../../../src/build/snapshot-catalogue.js';
import { quoteIdent } from '../../../src/db/database.js';
import { ConfigError, LarderError, UsageError } from '../../../src/db/errors.js';
import { useTestDb } from '../../helpers/db.js';
import { insertChain } from './chain-fixture.js';

const t = useTestDb(import.meta.url, {
  sets: [
    {
      name: 'life',
      horizon: 7,
      training: { days: 60 },
      stockoutMask: true,
      families: {
        lags: { days: [7] },
        windows: [{ size: 14, shift: 7, stats: ['mean', 'std'] }],
        calendar: { features: ['day_of_week'] },
        prices: { features: ['price'] },
        encodings: [{ groups: ['item', 'store'], window: 28 }],
        hierarchy: [{ levels: ['item'], size: 7 }],
      },
    },
  ],
});

const CUTOFF = '2023-06-01';

async function tableStats(db: ReturnType<typeof t>['db'], table: string) {
  const r = await db.query<{ n: number; s: number | null; f: number | null }>(
    `SELECT count(*)::int8 AS n, sum(label)::int8 AS s, sum(mean_14d_s7) AS f FROM ${quoteIdent(table)}`,
  );
  return r.rows[0]!;
}

describe('snapshot lifecycle', () => {
  test('a build writes the table and the catalogue row; prediction rows are exactly H per series', async () => {
    const { db, config } = t();
    await insertChain(db, { stores: 2, items: 5, start: '2023-01-01', days: 160 });
    const info = await buildSnapshot(db, config, { set: 'life', cutoff: CUTOFF });
    expect(await getSnapshot(db, 'life', CUTOFF)).toMatchObject({
      snapshotId: info.snapshotId,
      tableName: info.tableName,
      mode: 'shift',
      horizon: 7,
      trainFrom: '2023-04-03',
    });
    expect(info.columns.map((c) => c.name)).toEqual([
      'lag_7',
      'mean_14d_s7',
      'std_14d_s7',
      'day_of_week',
      'price',
      'enc_item_28d_s7',
      'enc_store_28d_s7',
      'item_mean_7d_s7',
      'item_std_7d_s7',
    ]);
    const per = await db.query<{ series_id: number; n: number; lo: string; hi: string }>(
      `SELECT series_id, count(*)::int AS n, min(day)::text AS lo, max(day)::text AS hi FROM ${quoteIdent(info.tableName)}
       WHERE is_predict GROUP BY series_id`,
    );
    expect(per.rows.length).toBe(10);
    for (const r of per.rows) expect([r.n, r.lo, r.hi]).toEqual([7, '2023-06-02', '2023-06-08']);
    const labels = await db.query<{ bad: number }>(
      `SELECT count(*)::int AS bad FROM ${quoteIdent(info.tableName)} WHERE (is_predict AND label IS NOT NULL) OR (NOT is_predict AND (label IS NULL OR day > DATE '${CUTOFF}'))`,
    );
    expect(labels.rows[0]!.bad).toBe(0);
    expect(info.rowCount).toBe(info.trainRows + info.predictRows);
    expect(Number((await tableStats(db, info.tableName)).n)).toBe(info.rowCount);
  });

  test('a rebuild swaps atomically: a reader sees the old snapshot or the new one, never a mix', async () => {
    const { db, config } = t();
    const old = (await getSnapshot(db, 'life', CUTOFF))!;
    const before = await tableStats(db, old.tableName);
    await db.exec(
      `UPDATE sales SET units = units + 1 WHERE day BETWEEN DATE '2023-04-01' AND DATE '${CUTOFF}'`,
    );
    const seen: string[] = [];
    let building = true;
    const reader = (async () => {
      while (building) {
        const obs = await withSnapshot(db, 'life', CUTOFF, async (tx, info) => {
          const r = await tx.query<{ n: number; s: number }>(
            `SELECT count(*)::int8 AS n, sum(label)::int8 AS s FROM ${quoteIdent(info.tableName)}`,
          );
          return `${info.dataFingerprint}|${r.rows[0]!.n}|${r.rows[0]!.s}`;
        });
        seen.push(obs);
      }
    })();
    const fresh = await buildSnapshot(db, config, { set: 'life', cutoff: CUTOFF });
    building = false;
    await reader;
    const after = await tableStats(db, fresh.tableName);
    const allowed = new Set([
      `${old.dataFingerprint}|${before.n}|${before.s}`,
      `${fresh.dataFingerprint}|${after.n}|${after.s}`,
    ]);
    expect(seen.some((o) => o.startsWith(old.dataFingerprint))).toBe(true);
    for (const o of seen) expect(allowed.has(o), o).toBe(true);
    expect(fresh.dataFingerprint).not.toBe(old.dataFingerprint);
    expect(fresh.snapshotId).toBeGreaterThan(old.snapshotId);
    expect(Number(after.s)).toBeGreaterThan(Number(before.s));
    // The old table is gone; one catalogue row remains.
    const gone = await db.query('SELECT 1 FROM pg_tables WHERE schemaname = $1 AND tablename = $2', [
      db.schema,
      old.tableName,
    ]);
    expect(gone.rows.length).toBe(0);
    expect((await listSnapshots(db, 'life')).length).toBe(1);
  });

  test('a partition re-run replaces its rows; finish refuses missing partitions and loads during the build', async () => {
    const { db, config } = t();
    const plan = await planBuild(db, config, { set: 'life', cutoff: '2023-05-20' });
    expect(plan.partitions).toEqual(['st1', 'st2']);
    const first = await buildPartition(db, config, plan, 'st1');
    await expect(finishBuild(db, config, plan)).rejects.toMatchObject({ code: 'PARTITIONS_MISSING' });
    const again = await buildPartition(db, config, plan, 'st1');
    expect(again.rowCount).toBe(first.rowCount);
    const n = await db.query<{ n: number }>(
      `SELECT count(*)::int AS n FROM ${quoteIdent(plan.stagingTable)}`,
    );
    expect(n.rows[0]!.n).toBe(first.rowCount);
    await buildPartition(db, config, plan, 'st2');
    // A load batch recorded after the plan: the rows might mix old and new data.
    await db.query(
      "INSERT INTO load_batches (target, file, mode, status) VALUES ('sales', 'late.csv', 'append', 'loaded')",
    );
    await expect(finishBuild(db, config, plan)).rejects.toMatchObject({ code: 'DATA_CHANGED' });
    expect(await getSnapshot(db, 'life', '2023-05-20')).toBeNull();
    await abortBuild(db, plan);
    const left = await db.query('SELECT 1 FROM pg_tables WHERE schemaname = $1 AND tablename LIKE $2', [
      db.schema,
      `${plan.stagingTable}%`,
    ]);
    expect(left.rows.length).toBe(0);
    await expect(buildPartition(db, config, plan, 'st1')).rejects.toMatchObject({ code: 'BUILD_GONE' });
    await expect(buildPartition(db, config, plan, 'nowhere')).rejects.toBeInstanceOf(UsageError);
  });

  test('a plan whose chain totals stay in the planning process is refused by any other partition run', async () => {
    const { db, config } = t();
    let draftPartitions: readonly string[] = [];
    const plan = await planBuild(
      db,
      config,
      { set: 'life', cutoff: '2023-05-20' },
      {
        alongside: async (draft) => {
          draftPartitions = draft.partitions;
        },
      },
    );
    expect(draftPartitions).toEqual(['st1', 'st2']);
    expect(plan.groupTable).toBeNull();
    expect(plan.chainLevels).toEqual(['item', 'region', 'department']);
    await expect(buildPartition(db, config, plan, 'st1')).rejects.toMatchObject({ code: 'PLAN_IN_PROCESS' });
    await abortBuild(db, plan);
  });

  test('bad requests fail clearly and leave the stored snapshot untouched', async () => {
    const { db, config } = t();
    const live = (await getSnapshot(db, 'life', CUTOFF))!;
    await expect(buildSnapshot(db, config, { set: 'nope', cutoff: CUTOFF })).rejects.toBeInstanceOf(
      ConfigError,
    );
    await expect(buildSnapshot(db, config, { set: 'life', cutoff: '2023-02-30' })).rejects.toThrow(
      "cutoff: '2023-02-30' is not an ISO 8601 day",
    );
    await expect(
      buildSnapshot(db, config, { set: 'life', cutoff: CUTOFF, from: '2023-07-01' }),
    ).rejects.toBeInstanceOf(UsageError);
    // A rebuild that fails half-way (a load lands mid-build) keeps the old snapshot whole.
    const plan = await planBuild(db, config, { set: 'life', cutoff: CUTOFF });
    for (const p of plan.partitions) await buildPartition(db, config, plan, p);
    await db.query(
      "INSERT INTO load_batches (target, file, mode, status) VALUES ('sales', 'later.csv', 'append', 'loaded')",
    );
    await expect(finishBuild(db, config, plan)).rejects.toBeInstanceOf(LarderError);
    await abortBuild(db, plan);
    const still = (await getSnapshot(db, 'life', CUTOFF))!;
    expect(still.tableName).toBe(live.tableName);
    expect(Number((await tableStats(db, still.tableName)).n)).toBe(live.rowCount);
  });
});
