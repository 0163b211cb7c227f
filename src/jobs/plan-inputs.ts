import { advanceFingerprint, type DataFingerprint, dataFingerprint } from '../build/fingerprint.js';
import type { Db, DbSession } from '../db/database.js';
import { type ChangeMark, changeInside, changesSince, readChangeMark, snapshotMark } from './change-log.js';

/** How a run got a set's data fingerprint, and where the change log stood before it. */
export interface PlannedFingerprint {
  readonly fp: DataFingerprint;
  readonly mark: ChangeMark;
  /** The snapshot whose fingerprint was advanced, or null for a full scan (with the reason). */
  readonly from: { readonly snapshotId: number; readonly cutoff: string } | null;
  readonly note: string;
}

interface Candidate {
  snapshot_id: string;
  cutoff: string;
  fingerprint_parts: DataFingerprint['parts'];
}

/**
 * The data fingerprint of `set` at (cutoff, priceBoundary). When the set's newest snapshot at or
 * before the cutoff has a change mark and the change log shows nothing inside its boundaries
 * since, its fingerprint is advanced over the new days only (exactly the full fingerprint, see
 * advanceFingerprint); otherwise every raw table is scanned.
 */
export async function planFingerprint(
  db: Db,
  set: string,
  cutoff: number,
  priceBoundary: number,
  cutoffText: string,
): Promise<PlannedFingerprint> {
  const mark = await readChangeMark(db);
  const run = <T>(fn: (s: DbSession) => Promise<T>) => db.session(fn);
  const prev = (
    await db.query<Candidate>(
      `SELECT s.snapshot_id, s.cutoff, s.fingerprint_parts FROM snapshots s
       WHERE s.set_name = $1 AND s.cutoff <= $2::date ORDER BY s.cutoff DESC LIMIT 1`,
      [set, cutoffText],
    )
  ).rows[0];
  const full = async (note: string): Promise<PlannedFingerprint> => ({
    fp: await dataFingerprint(run, cutoff, priceBoundary),
    mark,
    from: null,
    note,
  });
  if (!prev) return full('no earlier snapshot');
  const m = await snapshotMark(db, Number(prev.snapshot_id));
  if (!m) return full(`the snapshot of ${prev.cutoff} has no change mark`);
  if (m.cutoff > cutoff || m.priceBoundary > priceBoundary)
    return full(`the snapshot of ${prev.cutoff} saw more days than this cutoff`);
  const since = await changesSince(db, m.mark);
  if (since === null) return full('a change committed out of order; the log cannot tell what changed');
  const inside = changeInside(since, m);
  if (inside !== null) return full(inside);
  const fp = await advanceFingerprint(
    run,
    { cutoff: m.cutoff, priceBoundary: m.priceBoundary, parts: prev.fingerprint_parts },
    cutoff,
    priceBoundary,
  );
  return {
    fp,
    mark,
    from: { snapshotId: Number(prev.snapshot_id), cutoff: prev.cutoff },
    note: `advanced from the snapshot of ${prev.cutoff}`,
  };
}
