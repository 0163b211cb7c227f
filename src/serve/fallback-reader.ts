import { formatDay } from '../core/days.js';
import { type Db, quoteIdent } from '../db/database.js';
import { SqlState, sqlState } from '../db/errors.js';
import { findPublishedSnapshot, type SnapshotEntry } from '../publish/snapshot-catalogue.js';
import type { FeatureRow } from './read-types.js';

/** The snapshot a set's reads fall back to: the one behind its newest finished publish. */
export interface FallbackTarget {
  readonly entry: SnapshotEntry;
  readonly version: number;
}

export interface SeriesQuery {
  readonly item: string;
  readonly store: string;
  /** Epoch day, or null for all H days. */
  readonly day: number | null;
}

/**
 * Reads prediction rows from the snapshot table when the cache cannot answer. One set-based query
 * per batch (series pairs unnested and joined), never one per series. Values are rounded to
 * Float32 so a fallback answer equals the cached one bit for bit.
 */
export class FallbackReader {
  private readonly db: Db;
  private readonly targetCacheMs: number;
  private readonly targets = new Map<string, { at: number; target: FallbackTarget | null }>();

  constructor(db: Db, targetCacheMs = 1000) {
    this.db = db;
    this.targetCacheMs = targetCacheMs;
  }

  /** The published snapshot of `set`, or null when the set was never published. */
  async target(set: string): Promise<FallbackTarget | null> {
    const hit = this.targets.get(set);
    if (hit && performance.now() - hit.at < this.targetCacheMs) return hit.target;
    let target: FallbackTarget | null;
    try {
      target = await findPublishedSnapshot(this.db, set);
    } catch (err) {
      // No catalogue or publishes table yet: nothing was ever published.
      if (sqlState(err) !== SqlState.undefinedTable) throw err;
      target = null;
    }
    this.targets.set(set, { at: performance.now(), target });
    return target;
  }

  /** Rows per query in the order asked; null where the series is not in the snapshot. */
  async read(target: FallbackTarget, queries: readonly SeriesQuery[]): Promise<(FeatureRow[] | null)[]> {
    const { entry } = target;
    const cols = entry.columns.map((c, i) => `t.${quoteIdent(c.name)} AS f${i}`).join(', ');
    const sql = `SELECT k.i::int4 AS i, t.day::text AS day${cols ? `, ${cols}` : ''}
      FROM unnest($1::text[], $2::text[], $3::date[]) WITH ORDINALITY AS k(item_id, store_id, d, i)
      JOIN series s ON s.item_id = k.item_id AND s.store_id = k.store_id
      JOIN ${quoteIdent(entry.tableName)} t ON t.series_id = s.series_id AND t.is_predict
        AND (k.d IS NULL OR t.day = k.d)
      ORDER BY k.i, t.day`;
    const { rows } = await this.db.query<Record<string, number | string | null>>(sql, [
      queries.map((q) => q.item),
      queries.map((q) => q.store),
      queries.map((q) => (q.day === null ? null : formatDay(q.day))),
    ]);
    const out: (FeatureRow[] | null)[] = queries.map(() => null);
    for (const r of rows) {
      const features: Record<string, number | null> = {};
      entry.columns.forEach((c, f) => {
        const v = r[`f${f}`];
        const x = v === null || v === undefined ? Number.NaN : Math.fround(Number(v));
        features[c.name] = Number.isNaN(x) ? null : x;
      });
      const i = Number(r.i) - 1;
      const list = out[i] ?? [];
      list.push({ day: String(r.day), features });
      out[i] = list;
    }
    return out;
  }
}
