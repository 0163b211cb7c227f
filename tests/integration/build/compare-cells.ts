import type { DbSession } from '../../../src/db/database.js';
import { quoteIdent } from '../../../src/db/database.js';
import type { RefRow } from './duckdb-reference.js';

/** A snapshot's rows keyed "series|origin|day" (epoch days), features as numbers or null. */
export async function snapshotCells(db: DbSession, table: string): Promise<Map<string, RefRow>> {
  const r = await db.query<Record<string, unknown>>(
    `SELECT *, (day - DATE '1970-01-01') AS kday, (origin - DATE '1970-01-01') AS korigin FROM ${quoteIdent(table)}`,
  );
  const out = new Map<string, RefRow>();
  for (const row of r.rows) {
    const cells: RefRow = {};
    for (const [k, v] of Object.entries(row)) {
      if (k === 'day' || k === 'origin') continue;
      cells[k] = v === null ? null : typeof v === 'boolean' ? Number(v) : Number(v);
    }
    out.set(`${row.series_id}|${row.korigin ?? ''}|${row.kday}`, cells);
  }
  return out;
}

/**
 * Every cell of `columns` in `got` against `want`: both NULL, or equal within a relative
 * tolerance of 1e-9 (absolute 1e-12 near zero, where a relative error is meaningless).
 */
export function compareCells(
  got: ReadonlyMap<string, RefRow>,
  want: ReadonlyMap<string, RefRow>,
  columns: readonly string[],
  tol = 1e-9,
): { compared: number; mismatches: string[] } {
  const mismatches: string[] = [];
  let compared = 0;
  for (const [key, g] of got) {
    const w = want.get(key);
    if (!w) {
      mismatches.push(`${key}: row missing from the reference`);
      continue;
    }
    for (const c of columns) {
      const a = g[c] ?? null;
      const b = w[c] ?? null;
      compared++;
      if (a === null || b === null) {
        if (a !== b) mismatches.push(`${key} ${c}: got ${a}, reference ${b}`);
        continue;
      }
      const diff = Math.abs(a - b);
      if (diff > Math.max(tol * Math.max(Math.abs(a), Math.abs(b)), 1e-12))
        mismatches.push(`${key} ${c}: got ${a}, reference ${b}`);
    }
  }
  if (want.size !== got.size)
    mismatches.push(`row counts differ: snapshot ${got.size}, reference ${want.size}`);
  return { compared, mismatches };
}
