import { parseDay } from '../core/days.js';
import type { DbSession } from '../db/database.js';
import type { FeatureCache } from './feature-cache.js';
import { type KeyLayout, parseManifest } from './layout.js';
import type { SnapshotEntry } from './snapshot-catalogue.js';

/**
 * What a publish may carry over from the current version instead of reading it again: the
 * first `days` rows of every series' matrix (days firstDay .. firstDay + days - 1 of the new
 * version), found at rows `offset` .. `offset + days - 1` of the same series in `fromVersion`,
 * for every series not in `recomputed`.
 */
export interface Carry {
  readonly fromVersion: number;
  readonly offset: number;
  readonly days: number;
  /** The last carried day (epoch day): later prediction rows are read from the snapshot. */
  readonly keptUntil: number;
  readonly recomputed: ReadonlySet<number>;
}

/**
 * The carry a publish of `entry` may use, or null. An incremental refresh records which
 * prediction days it kept of the previous snapshot (snapshot_carries); those rows equal the
 * previous snapshot's, so they equal the vectors of a version published from that snapshot. The
 * version must be the one the pointer names (complete and persistent), from exactly that
 * snapshot, with the same definition, horizon, mode and columns in the same order, and hold
 * the kept days. Anything else publishes in full.
 */
export async function planCarry(
  s: DbSession,
  cache: FeatureCache,
  layout: KeyLayout,
  entry: SnapshotEntry,
): Promise<Carry | null> {
  const row = (
    await s.query<{ from_id: number; kept_from: string; kept_until: string; recomputed: number[] }>(
      `SELECT from_snapshot_id AS from_id, kept_from::text AS kept_from, kept_until::text AS kept_until, recomputed
       FROM snapshot_carries WHERE snapshot_id = $1`,
      [entry.snapshotId],
    )
  ).rows[0];
  if (!row) return null;
  const pointer = await cache.getString(layout.pointer(entry.set));
  if (pointer === null || !/^\d+$/.test(pointer)) return null;
  const fromVersion = Number(pointer);
  const key = layout.manifest(entry.set, fromVersion);
  const text = await cache.getString(key);
  if (text === null) return null;
  let m: ReturnType<typeof parseManifest>;
  try {
    m = parseManifest(text, key);
  } catch {
    return null;
  }
  const H = entry.horizon;
  const sameColumns =
    m.columns.length === entry.columns.length &&
    m.columns.every((c, i) => c.name === entry.columns[i]!.name && c.type === entry.columns[i]!.type);
  if (
    m.set !== entry.set ||
    m.snapshotId !== Number(row.from_id) ||
    m.definitionHash !== entry.definitionHash ||
    m.horizon !== H ||
    m.mode !== entry.mode ||
    !sameColumns
  )
    return null;
  const firstDay = parseDay(entry.cutoff)! + 1;
  const keptFrom = parseDay(row.kept_from)!;
  const keptUntil = parseDay(row.kept_until)!;
  const fromFirst = parseDay(m.firstDay)!;
  // The kept days start the new matrix and lie inside the old one.
  if (
    keptFrom !== firstDay ||
    keptFrom < fromFirst ||
    keptUntil > fromFirst + H - 1 ||
    keptUntil >= firstDay + H - 1
  )
    return null;
  return {
    fromVersion,
    offset: keptFrom - fromFirst,
    days: keptUntil - keptFrom + 1,
    keptUntil,
    recomputed: new Set(row.recomputed.map(Number)),
  };
}
