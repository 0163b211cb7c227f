import { formatDay } from '../core/days.js';
import { CopyBinaryWriter, readCopyBinary, readCopyTuples } from '../db/binary-copy.js';
import { CacheSink, type CachePlan, readCacheState } from './cache-sink.js';
import type { Db, DbSession } from '../db/database.js';
import { changesSince, readChangeMark } from '../jobs/change-log.js';

/**
 * The checks' compact copy of the sales table (sql/000009.sql): blocks of BLOCK_DAYS days per
 * series. A pass whose blocks are valid reads the stored days from them (about 4 bytes a day
 * instead of a 40-byte COPY row, and no sort) and only the days after them from `sales`; every
 * visitor sees the same dense arrays as from a full read, so findings are unchanged.
 */
export const BLOCK_DAYS = 256;
/** A day of a block without a row (int4's minimum; a stored row holding it is never cached). */
export const NO_ROW = -2147483648;
/** A change older than this many days before the covered end makes a full read cheaper than a merge. */
export const MAX_TAIL_DAYS = 120;
const BLOCK_BYTES = BLOCK_DAYS * 4;

export const blockOf = (day: number): number => Math.floor(day / BLOCK_DAYS);

/** What a sales pass may take from the blocks (`usable`: days up to that one). */
export type BlockPlan = CachePlan;

/**
 * Which days the blocks may give: those up to the state's covered day, less any sales changed
 * since the state's mark (the first changed day and later are read from `sales` again).
 */
export async function planBlocks(db: DbSession): Promise<BlockPlan> {
  const mark = await readChangeMark(db);
  const state = await readCacheState(db, 'sales_blocks_state');
  if (!state) return { usable: null, reason: 'no blocks stored yet', mark, state: null };
  const since = await changesSince(db, { last: state.last, count: state.count });
  if (since === null) return { usable: null, reason: 'the change log cannot tell what changed', mark, state };
  let usable = state.coveredTo;
  let reason: string | null = null;
  for (const c of since) {
    if (c.table !== 'sales') continue;
    if (c.firstDay === null)
      return { usable: null, reason: 'sales were changed outside the loader', mark, state };
    if (c.firstDay <= usable) {
      usable = c.firstDay - 1;
      reason = `sales of ${formatDay(c.firstDay)} changed`;
    }
  }
  if (state.coveredTo - usable > MAX_TAIL_DAYS)
    return { usable: null, reason: `${reason}: more than ${MAX_TAIL_DAYS} days to reread`, mark, state };
  return { usable, reason, mark, state };
}

/** The sales rows after `after` up to `cutoff` (in series and day order), as flat arrays. */
export async function readTail(
  db: DbSession,
  after: number,
  cutoff: number | null,
): Promise<{
  readonly n: number;
  readonly sid: Int32Array;
  readonly day: Int32Array;
  readonly units: Int32Array;
}> {
  const upTo = cutoff === null ? '' : ` AND s.day <= DATE '${formatDay(cutoff)}'`;
  // A range scan of the key per series: sales are stored series by series, so the newest days
  // are spread over the whole table, and a filter on the day scans all of it (measured on 57M
  // rows: one new day took 1.86 s by the day filter, 0.24 s by the key; OFFSET 0 keeps the loop).
  const sql = `COPY (SELECT x.series_id, x.day, x.units FROM series r CROSS JOIN LATERAL
      (SELECT s.series_id, s.day, s.units FROM sales s WHERE s.series_id = r.series_id
        AND s.day > DATE '${formatDay(after)}'${upTo} OFFSET 0) x
      ORDER BY x.series_id, x.day) TO STDOUT (FORMAT binary)`;
  const parts: Int32Array[][] = [];
  let n = 0;
  for await (const b of readCopyBinary(db.copyTo(sql), ['int4', 'date', 'int4'])) {
    parts.push((b.columns as Int32Array[]).map((c) => c.subarray(0, b.length)));
    n += b.length;
  }
  const cat = (k: number) => {
    const out = new Int32Array(n);
    let o = 0;
    for (const p of parts) {
      out.set(p[k]!, o);
      o += p[k]!.length;
    }
    return out;
  };
  return { n, sid: cat(0), day: cat(1), units: cat(2) };
}

/**
 * Streams the blocks holding days up to `upTo` in (series, block) order, calling `row` with each
 * block's series, first day and its days as little-endian int4 at `offset` of `view`.
 */
export async function readBlocks(
  db: DbSession,
  upTo: number,
  row: (seriesId: number, firstDay: number, view: DataView, offset: number) => void,
): Promise<number> {
  const sql = `COPY (SELECT series_id, block, units FROM sales_blocks WHERE block <= ${blockOf(upTo)} ORDER BY series_id, block) TO STDOUT (FORMAT binary)`;
  return readCopyTuples(db.copyTo(sql), 3, (dv, _bytes, at) => {
    if (at[1] !== 4 || at[3] !== 4 || at[5] !== BLOCK_BYTES)
      throw new Error('sales_blocks: a block row of an unexpected shape');
    row(dv.getInt32(at[0]!), dv.getInt32(at[2]!) * BLOCK_DAYS, dv, at[4]!);
  });
}

/** The blocks a pass rewrites: every block of each series from `fromBlock` on. */
export class BlockSink {
  private readonly writer = new CopyBinaryWriter();
  private readonly bytes = new Uint8Array(BLOCK_BYTES);
  private readonly view = new DataView(this.bytes.buffer);
  private readonly sink: CacheSink;
  /** A stored value equal to NO_ROW: this pass's blocks are not written. */
  private unencodable = false;
  /** Blocks encoded. */
  blocks = 0;

  constructor(
    db: Db,
    plan: BlockPlan,
    /** First block rewritten; null: every block (the store is replaced). */
    readonly fromBlock: number | null,
  ) {
    this.sink = new CacheSink(db, {
      lockKey: `larder.sales_blocks:${db.schema}`,
      stateTable: 'sales_blocks_state',
      state: plan.state,
      mark: plan.mark,
      clear:
        fromBlock === null
          ? ['DELETE FROM sales_blocks', []]
          : ['DELETE FROM sales_blocks WHERE block >= $1', [fromBlock]],
      copySql: 'COPY sales_blocks (series_id, block, units) FROM STDIN (FORMAT binary)',
    });
  }

  /** Encodes one series (a dense array from `firstDay`, NaN = no row) from `fromBlock` on. */
  add(seriesId: number, firstDay: number, units: Float64Array): void {
    if (this.unencodable || units.length === 0) return;
    const lastDay = firstDay + units.length - 1;
    const w = this.writer;
    const from = Math.max(this.fromBlock ?? blockOf(firstDay), blockOf(firstDay));
    for (let b = from; b <= blockOf(lastDay); b++) {
      const start = b * BLOCK_DAYS;
      let present = 0;
      for (let k = 0; k < BLOCK_DAYS; k++) {
        const i = start + k - firstDay;
        const v = i >= 0 && i < units.length ? units[i]! : Number.NaN;
        if (v === NO_ROW) this.unencodable = true;
        if (Number.isNaN(v)) this.view.setInt32(4 * k, NO_ROW, true);
        else {
          this.view.setInt32(4 * k, v, true);
          present++;
        }
      }
      if (present === 0) continue;
      w.row(3);
      w.int4(seriesId);
      w.int4(b);
      w.bytea(this.bytes);
      this.blocks++;
    }
    this.sink.push(w.take());
  }

  /**
   * Ends the pass: with `coveredTo` (the newest day it read), stores the blocks and the state;
   * with null, discards them. Resolves with whether they were stored.
   */
  finish(coveredTo: number | null): Promise<boolean> {
    this.sink.push(this.writer.end());
    return this.sink.finish(this.unencodable ? null : coveredTo);
  }
}
