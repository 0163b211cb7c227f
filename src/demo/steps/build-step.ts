import { buildSnapshot } from '../../build/build-snapshot.js';
import { quoteIdent } from '../../db/database.js';
import { LarderError } from '../../db/errors.js';
import type { DemoStep } from '../demo.js';

/** Columns shown in the sample (those the set has), besides the keys and the label. */
const SAMPLE = [
  'lag_28',
  'mean_7d_s28',
  'mean_28d_s28',
  'day_of_week',
  'price',
  'enc_item_91d_s28',
  'store_mean_28d_s28',
];

/**
 * Builds the demo's feature set (`standard`, else the first configured) as of the last sales
 * day, as `larder build --set standard --cutoff latest` would, and prints a sample of rows.
 */
export const buildStep: DemoStep = {
  name: 'build features',
  async run(ctx) {
    const { db, config } = ctx;
    const set = config.sets.find((s) => s.name === 'standard') ?? config.sets[0];
    if (!set) throw new LarderError('DEMO', 'the demo config declares no feature set to build');
    const last = (await db.query<{ d: string | null }>('SELECT max(day)::text AS d FROM sales')).rows[0]?.d;
    if (!last) throw new LarderError('DEMO', 'no sales were loaded, nothing to build');
    const info = await buildSnapshot(
      db,
      config,
      { set: set.name, cutoff: last },
      {
        onPartition: (r, done, total) =>
          ctx.out(
            `  partition ${r.partition.padEnd(14)} ${String(r.rowCount).padStart(8)} rows  ${done}/${total}`,
          ),
      },
    );
    ctx.out(
      `  ${info.set} @ ${info.cutoff}: table ${info.tableName}, ${info.rowCount} rows (${info.trainRows} training from ${info.trainFrom}, ${info.predictRows} prediction), ${info.columns.length} features`,
    );
    ctx.out(`  definition ${info.definitionHash.slice(0, 16)}  data ${info.dataFingerprint.slice(0, 16)}`);
    const names = new Set(info.columns.map((c) => c.name));
    const shown = SAMPLE.filter((c) => names.has(c));
    const cols = ['series_id', 'day', 'is_predict', 'label', ...shown];
    const rows = (
      await db.query<Record<string, unknown>>(
        `SELECT ${cols.map(quoteIdent).join(', ')} FROM ${quoteIdent(info.tableName)}
         WHERE series_id = (SELECT min(series_id) FROM ${quoteIdent(info.tableName)})
           AND day BETWEEN $1::date - 2 AND $1::date + 3 ORDER BY day`,
        [info.cutoff],
      )
    ).rows;
    const fmt = (v: unknown) =>
      v === null ? 'NULL' : typeof v === 'number' ? String(Math.round(v * 1000) / 1000) : String(v);
    const widths = cols.map((c) => Math.max(c.length, ...rows.map((r) => fmt(r[c]).length)));
    ctx.out(`  ${cols.map((c, i) => c.padStart(widths[i]!)).join(' ')}`);
    for (const r of rows) ctx.out(`  ${cols.map((c, i) => fmt(r[c]).padStart(widths[i]!)).join(' ')}`);
  },
};
