import type { Config } from '../config/config.js';
import { type Db, quoteIdent } from '../db/database.js';
import { LarderError, SqlState, sqlState } from '../db/errors.js';
import type { BuildPlan } from './build-plan.js';
import { planFeatureSet } from './build-plan.js';
import { getSnapshot, type SnapshotInfo } from './snapshot-catalogue.js';

/**
 * Finishes a build: checks that every partition completed and that no load happened since the
 * plan, then in ONE transaction points the catalogue row at the new table and drops the old
 * one. Readers that lock the row (withSnapshot) see the old snapshot or the new, never a mix.
 */
export async function finishBuild(
  db: Db,
  _config: Config,
  plan: BuildPlan,
  extraTimings: Record<string, unknown> = {},
): Promise<SnapshotInfo> {
  const set = planFeatureSet(plan);
  await db.transaction(async (tx) => {
    await tx.query('SELECT pg_advisory_xact_lock(hashtext($1))', [`larder.build.${plan.set}.${plan.cutoff}`]);
    const build = await tx.query<{ finished_at: unknown }>(
      'SELECT finished_at FROM snapshot_builds WHERE table_name = $1 FOR UPDATE',
      [plan.stagingTable],
    );
    if (!build.rows[0] || build.rows[0].finished_at !== null) {
      throw new LarderError('BUILD_GONE', `build ${plan.stagingTable} is finished, aborted or superseded`);
    }
    const parts = (
      await tx.query<{
        partition: string;
        row_count: number;
        train_rows: number;
        predict_rows: number;
        timings: unknown;
      }>(
        'SELECT partition, row_count, train_rows, predict_rows, timings FROM snapshot_build_parts WHERE table_name = $1',
        [plan.stagingTable],
      )
    ).rows;
    const done = new Set(parts.map((p) => p.partition));
    const missing = plan.partitions.filter((p) => !done.has(p));
    if (missing.length) {
      throw new LarderError(
        'PARTITIONS_MISSING',
        `build ${plan.stagingTable}: ${missing.length} partition(s) not built: ${missing.slice(0, 10).join(', ')}${missing.length > 10 ? ', ...' : ''}`,
      );
    }
    const mark = (
      await tx.query<{ n: number; last: number }>(
        'SELECT count(*)::int8 AS n, coalesce(max(batch_id), 0)::int8 AS last FROM load_batches',
      )
    ).rows[0]!;
    if (Number(mark.n) !== plan.loadMark.batches || Number(mark.last) !== plan.loadMark.lastBatch) {
      throw new LarderError(
        'DATA_CHANGED',
        'data was loaded while the build ran, so its rows may mix old and new data: build again',
      );
    }
    const sum = (k: 'row_count' | 'train_rows' | 'predict_rows') =>
      parts.reduce((a, p) => a + Number(p[k]), 0);
    const timings = {
      ...extraTimings,
      partitions: Object.fromEntries(parts.map((p) => [p.partition, p.timings])),
    };
    const columns = set.columns.map((c) => ({
      name: c.name,
      type: 'float8',
      family: c.family,
      description: c.description,
    }));
    const old = await tx.query<{ table_name: string }>(
      'SELECT table_name FROM snapshots WHERE set_name = $1 AND cutoff = $2 FOR UPDATE',
      [plan.set, plan.cutoff],
    );
    await tx.query(
      `INSERT INTO snapshots (set_name, cutoff, definition_hash, data_fingerprint, table_name, mode, horizon, columns,
         row_count, train_rows, predict_rows, timings, train_from, fingerprint_parts, codes, definition)
       VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16)
       ON CONFLICT (set_name, cutoff) DO UPDATE SET
         snapshot_id = nextval(pg_get_serial_sequence('snapshots', 'snapshot_id')),
         definition_hash = EXCLUDED.definition_hash, data_fingerprint = EXCLUDED.data_fingerprint,
         table_name = EXCLUDED.table_name, mode = EXCLUDED.mode, horizon = EXCLUDED.horizon,
         columns = EXCLUDED.columns, row_count = EXCLUDED.row_count, train_rows = EXCLUDED.train_rows,
         predict_rows = EXCLUDED.predict_rows, built_at = now(), timings = EXCLUDED.timings,
         train_from = EXCLUDED.train_from, fingerprint_parts = EXCLUDED.fingerprint_parts,
         codes = EXCLUDED.codes, definition = EXCLUDED.definition`,
      [
        plan.set,
        plan.cutoff,
        plan.definitionHash,
        plan.dataFingerprint,
        plan.stagingTable,
        set.shape.mode,
        set.shape.horizon,
        JSON.stringify(columns),
        sum('row_count'),
        sum('train_rows'),
        sum('predict_rows'),
        JSON.stringify(timings),
        plan.from,
        JSON.stringify(plan.fingerprintParts),
        JSON.stringify(plan.codes),
        JSON.stringify(plan.definition),
      ],
    );
    const oldTable = old.rows[0]?.table_name;
    if (oldTable && oldTable !== plan.stagingTable)
      await tx.exec(`DROP TABLE IF EXISTS ${quoteIdent(oldTable)}`);
    await tx.query('UPDATE snapshot_builds SET finished_at = now() WHERE table_name = $1', [
      plan.stagingTable,
    ]);
    if (plan.groupTable) await tx.exec(`DROP TABLE IF EXISTS ${quoteIdent(plan.groupTable)}`);
  });
  // No ANALYZE here: autovacuum analyses the new table after its inserts, and sampling it now
  // would add to every build for readers that scan it whole anyway.
  await dropSuperseded(db, plan);
  const info = await getSnapshot(db, plan.set, plan.cutoff);
  if (!info)
    throw new LarderError('BUILD_GONE', `snapshot ${plan.set} ${plan.cutoff} vanished after its build`);
  return info;
}

async function dropBuildTables(
  tx: { exec(sql: string): Promise<void>; query(sql: string, p?: readonly unknown[]): Promise<unknown> },
  table: string,
  groupTable: string | null,
) {
  await tx.exec(`DROP TABLE IF EXISTS ${quoteIdent(table)}`);
  if (groupTable) await tx.exec(`DROP TABLE IF EXISTS ${quoteIdent(groupTable)}`);
  await tx.query('DELETE FROM snapshot_builds WHERE table_name = $1', [table]);
}

/**
 * Builds of the same set and cutoff planned earlier and never finished are superseded: their
 * tables go. Done after the swap, with a short lock timeout, so a straggling partition of such
 * a build never holds up the swap (a later finish cleans what this one could not).
 */
async function dropSuperseded(db: Db, plan: BuildPlan): Promise<void> {
  try {
    await db.transaction(async (tx) => {
      await tx.exec("SET LOCAL lock_timeout = '2s'");
      const stale = (
        await tx.query<{ table_name: string; plan: BuildPlan }>(
          `SELECT table_name, plan FROM snapshot_builds WHERE set_name = $1 AND cutoff = $2 AND finished_at IS NULL
             AND planned_at <= (SELECT planned_at FROM snapshot_builds WHERE table_name = $3)`,
          [plan.set, plan.cutoff, plan.stagingTable],
        )
      ).rows;
      for (const s of stale) await dropBuildTables(tx, s.table_name, s.plan.groupTable);
    });
  } catch (err) {
    if (sqlState(err) !== SqlState.lockNotAvailable) throw err;
  }
}

/** Abandons a build: drops its staging tables and its record (a failed or cancelled build). */
export async function abortBuild(db: Db, plan: BuildPlan): Promise<void> {
  await db.transaction(async (tx) => {
    const r = await tx.query<{ finished_at: unknown }>(
      'SELECT finished_at FROM snapshot_builds WHERE table_name = $1 FOR UPDATE',
      [plan.stagingTable],
    );
    // A finished build's table is the live snapshot: never drop it here.
    if (r.rows[0] && r.rows[0].finished_at === null)
      await dropBuildTables(tx, plan.stagingTable, plan.groupTable);
  });
}
