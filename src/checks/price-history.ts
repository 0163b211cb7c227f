import { formatDay } from '../core/days.js';
import { CopyBinaryWriter, readCopyTuples } from '../db/binary-copy.js';
import type { Db, DbSession } from '../db/database.js';
import { changesSince, readChangeMark } from '../jobs/change-log.js';
import { CacheSink, type CachePlan, claimCache, readCacheState, writeCacheState } from './cache-sink.js';

/**
 * The checks' copy of the prices table (sql/000010.sql): per item and store, every week's
 * (week start, price) as 12-byte big-endian records. A pass with a valid copy reads one row per
 * item and store with the newer weeks appended by PostgreSQL, instead of millions of price rows.
 */
const REC = 12;

/** What a prices pass may take from the copy (`usable`: weeks starting up to that day). */
export type PriceHistoryPlan = CachePlan;

/** Whether the stored copy may be used: no price change on or before its covered week since its mark. */
export async function planPriceHistory(db: DbSession): Promise<PriceHistoryPlan> {
  const mark = await readChangeMark(db);
  const state = await readCacheState(db, 'price_history_state');
  if (!state) return { usable: null, reason: 'no price history stored yet', mark, state };
  const since = await changesSince(db, { last: state.last, count: state.count });
  if (since === null) return { usable: null, reason: 'the change log cannot tell what changed', mark, state };
  for (const c of since) {
    if (c.table !== 'prices') continue;
    if (c.firstDay === null)
      return { usable: null, reason: 'prices were changed outside the loader', mark, state };
    if (c.firstDay <= state.coveredTo)
      return { usable: null, reason: `prices of the week of ${formatDay(c.firstDay)} changed`, mark, state };
  }
  return { usable: state.coveredTo, reason: null, mark, state };
}

/** The newer weeks of each item and store as records, aggregated by PostgreSQL. */
function newWeeksSql(after: number, upTo: number | null): string {
  const until = upTo === null ? '' : ` AND week_start <= DATE '${formatDay(upTo)}'`;
  return `SELECT item_id, store_id,
      string_agg(int4send(week_start - DATE '1970-01-01') || float8send(price::float8), ''::bytea ORDER BY week_start) AS recs
    FROM prices WHERE week_start > DATE '${formatDay(after)}'${until} GROUP BY item_id, store_id`;
}

/**
 * Streams every item and store in key order with its records: the stored ones up to `usable`
 * and, when the cutoff lies past it, the newer weeks from `prices` appended. `group` gets the
 * records at `offset` of `view` (`n` of them, weeks past the cutoff included: the caller cuts).
 */
export async function readPriceHistory(
  tx: DbSession,
  usable: number,
  cutoff: number | null,
  group: (itemId: string, storeId: string, view: DataView, offset: number, n: number) => void,
): Promise<void> {
  const fresh = cutoff !== null && cutoff <= usable;
  const sql = fresh
    ? 'COPY (SELECT item_id, store_id, recs FROM price_history ORDER BY item_id, store_id) TO STDOUT (FORMAT binary)'
    : `COPY (SELECT item_id, store_id, CASE WHEN t.recs IS NULL THEN h.recs WHEN h.recs IS NULL THEN t.recs ELSE h.recs || t.recs END
         FROM price_history h FULL JOIN (${newWeeksSql(usable, cutoff)}) t USING (item_id, store_id)
         ORDER BY item_id, store_id) TO STDOUT (FORMAT binary)`;
  const text = new TextDecoder();
  await readCopyTuples(tx.copyTo(sql), 3, (dv, bytes, at) => {
    if (at[1]! < 0 || at[3]! < 0 || at[5]! < 0) throw new Error('price_history: a NULL field');
    const item = text.decode(bytes.subarray(at[0]!, at[0]! + at[1]!));
    const store = text.decode(bytes.subarray(at[2]!, at[2]! + at[3]!));
    group(item, store, dv, at[4]!, at[5]! / REC);
  });
}

/** The copy a pass over `prices` writes whole (the old one is replaced). */
export class PriceHistorySink {
  private readonly writer = new CopyBinaryWriter();
  private readonly sink: CacheSink;
  private bytes = new Uint8Array(REC * 512);

  constructor(db: Db, plan: PriceHistoryPlan) {
    this.sink = new CacheSink(db, {
      lockKey: `larder.price_history:${db.schema}`,
      stateTable: 'price_history_state',
      state: plan.state,
      mark: plan.mark,
      clear: ['DELETE FROM price_history', []],
      copySql: 'COPY price_history (item_id, store_id, recs) FROM STDIN (FORMAT binary)',
    });
  }

  add(itemId: string, storeId: string, weeks: Int32Array, prices: Float64Array, n: number): void {
    if (n * REC > this.bytes.length) this.bytes = new Uint8Array(n * REC * 2);
    const dv = new DataView(this.bytes.buffer);
    for (let i = 0; i < n; i++) {
      dv.setInt32(i * REC, weeks[i]!);
      dv.setFloat64(i * REC + 4, prices[i]!);
    }
    const w = this.writer;
    w.row(3);
    w.text(itemId);
    w.text(storeId);
    w.bytea(this.bytes.subarray(0, n * REC));
    this.sink.push(w.take());
  }

  finish(coveredTo: number | null): Promise<boolean> {
    this.sink.push(this.writer.end());
    return this.sink.finish(coveredTo);
  }
}

/**
 * Appends the weeks after the copy's covered week up to `coveredTo` to it, set-based, and moves
 * its state on (skipped when another pass changed the state meanwhile).
 */
export async function extendPriceHistory(
  db: Db,
  plan: PriceHistoryPlan,
  coveredTo: number,
): Promise<boolean> {
  const s = plan.state!;
  return db.transaction(async (tx) => {
    if (!(await claimCache(tx, `larder.price_history:${db.schema}`, 'price_history_state', s))) return false;
    await tx.exec(
      `INSERT INTO price_history (item_id, store_id, recs) ${newWeeksSql(s.coveredTo, coveredTo)}
       ON CONFLICT (item_id, store_id) DO UPDATE SET recs = price_history.recs || EXCLUDED.recs`,
    );
    await writeCacheState(tx, 'price_history_state', coveredTo, plan.mark);
    return true;
  });
}
