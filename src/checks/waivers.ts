import { z } from 'zod';
import { parseDay } from '../core/days.js';
import type { DbSession } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import { CHECK_NAMES, findCheck } from './registry.js';

const isoDay = (what: string) =>
  z.string().refine((v) => parseDay(v) !== null, { error: `${what}: expected a day YYYY-MM-DD` });

/** What `larder waive` accepts; days are ISO 8601 text. */
export const waiverInputSchema = z
  .object({
    check: z.string().refine((v) => CHECK_NAMES.includes(v), {
      error: (iss) => `--check: unknown check '${String(iss.input)}' (known: ${CHECK_NAMES.join(', ')})`,
    }),
    code: z.string().min(1).optional(),
    itemId: z.string().min(1).max(64).optional(),
    storeId: z.string().min(1).max(64).optional(),
    fromDay: isoDay('--from').optional(),
    toDay: isoDay('--to').optional(),
    reason: z
      .string()
      .refine((v) => v.trim().length > 0, { error: '--reason: say why the findings are acceptable' }),
    until: isoDay('--until').optional(),
  })
  .superRefine((w, ctx) => {
    if (w.fromDay && w.toDay && parseDay(w.fromDay)! > parseDay(w.toDay)!) {
      ctx.addIssue({ code: 'custom', message: `--from ${w.fromDay} is after --to ${w.toDay}` });
    }
    const def = findCheck(w.check);
    if (def && w.code && !(w.code in def.codes)) {
      ctx.addIssue({
        code: 'custom',
        message: `--code: check ${w.check} has no code '${w.code}' (codes: ${Object.keys(def.codes).join(', ')})`,
      });
    }
  });
export type WaiverInput = z.input<typeof waiverInputSchema>;

export interface Waiver {
  readonly waiverId: number;
  readonly check: string;
  readonly code: string | null;
  readonly itemId: string | null;
  readonly storeId: string | null;
  readonly fromDay: string | null;
  readonly toDay: string | null;
  readonly reason: string;
  readonly until: string | null;
  readonly createdAt: string;
  readonly revokedAt: string | null;
}

/** Validates and stores a waiver; bad input is a UsageError naming the option. */
export async function addWaiver(db: DbSession, input: WaiverInput): Promise<Waiver> {
  const parsed = waiverInputSchema.safeParse(input);
  if (!parsed.success) throw new UsageError(parsed.error.issues.map((i) => i.message).join('; '));
  const w = parsed.data;
  const res = await db.query<WaiverRow>(
    `INSERT INTO waivers ("check", code, item_id, store_id, from_day, to_day, reason, until)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8) RETURNING *`,
    [
      w.check,
      w.code ?? null,
      w.itemId ?? null,
      w.storeId ?? null,
      w.fromDay ?? null,
      w.toDay ?? null,
      w.reason.trim(),
      w.until ?? null,
    ],
  );
  return toWaiver(res.rows[0]!);
}

interface WaiverRow {
  waiver_id: number;
  check: string;
  code: string | null;
  item_id: string | null;
  store_id: string | null;
  from_day: string | null;
  to_day: string | null;
  reason: string;
  until: string | null;
  created_at: Date | string;
  revoked_at: Date | string | null;
}

const ts = (v: Date | string | null) => (v === null ? null : v instanceof Date ? v.toISOString() : String(v));

function toWaiver(r: WaiverRow): Waiver {
  return {
    waiverId: r.waiver_id,
    check: r.check,
    code: r.code,
    itemId: r.item_id,
    storeId: r.store_id,
    fromDay: r.from_day,
    toDay: r.to_day,
    reason: r.reason,
    until: r.until,
    createdAt: ts(r.created_at)!,
    revokedAt: ts(r.revoked_at),
  };
}

/** Every waiver, newest first (revoked ones included, marked). */
export async function listWaivers(db: DbSession): Promise<Waiver[]> {
  const res = await db.query<WaiverRow>('SELECT * FROM waivers ORDER BY waiver_id DESC');
  return res.rows.map(toWaiver);
}

/** Revokes a waiver; later runs no longer apply it (past runs keep their record). */
export async function revokeWaiver(db: DbSession, waiverId: number): Promise<void> {
  const res = await db.query(
    'UPDATE waivers SET revoked_at = now() WHERE waiver_id = $1 AND revoked_at IS NULL',
    [waiverId],
  );
  if (res.rowCount === 0) throw new UsageError(`--revoke: no active waiver ${waiverId}`);
}

/**
 * Marks the run's findings that an active waiver covers: same check (and code, item, store when
 * the waiver names them) with the finding's days inside the waiver's window. A waiver past its
 * `until` day, or revoked, no longer applies. The newest matching waiver is recorded. A failed
 * check cannot be waived. Returns how many findings were waived.
 */
export async function applyWaivers(db: DbSession, runId: number, today: string): Promise<number> {
  await db.query(
    `UPDATE findings f SET waived_by = (
       SELECT w.waiver_id FROM waivers w
       WHERE w."check" = f."check" AND w.revoked_at IS NULL AND (w.until IS NULL OR w.until >= $2::date)
         AND (w.code IS NULL OR w.code = f.code)
         AND (w.item_id IS NULL OR w.item_id = f.item_id)
         AND (w.store_id IS NULL OR w.store_id = f.store_id)
         AND (w.from_day IS NULL OR coalesce(f.first_day, f.week_start) >= w.from_day)
         AND (w.to_day IS NULL OR coalesce(f.last_day, f.week_start + 6, f.first_day) <= w.to_day)
       ORDER BY w.waiver_id DESC LIMIT 1)
     WHERE f.run_id = $1 AND f.code <> 'check-failed'
       AND EXISTS (SELECT 1 FROM waivers w WHERE w."check" = f."check")`,
    [runId, today],
  );
  const n = await db.query<{ n: number }>(
    'SELECT count(*)::int AS n FROM findings WHERE run_id = $1 AND waived_by IS NOT NULL',
    [runId],
  );
  return n.rows[0]?.n ?? 0;
}
