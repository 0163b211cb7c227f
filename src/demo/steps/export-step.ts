import { mkdirSync } from 'node:fs';
import { join, relative } from 'node:path';
import { formatDay, parseDay } from '../../core/days.js';
import { LarderError } from '../../db/errors.js';
import { scoreForecasts } from '../../eval/score-forecasts.js';
import { formatScoreTable } from '../../eval/score-report.js';
import { exportSnapshot } from '../../export/export-snapshot.js';
import type { DemoStep } from '../demo.js';

/**
 * Exports the training rows of the snapshot the demo built to Parquet (with its manifest), then
 * scores the naive and seasonal naive forecasts over the 12 levels at the last cutoff that still
 * has a whole horizon of actuals after it: where a model has to beat them.
 */
export const exportStep: DemoStep = {
  name: 'export and score',
  async run(ctx) {
    const { db, config } = ctx;
    const built = (
      await db.query<{ set_name: string; cutoff: string; horizon: number }>(
        'SELECT set_name, cutoff::text AS cutoff, horizon FROM snapshots ORDER BY built_at DESC, snapshot_id DESC LIMIT 1',
      )
    ).rows[0];
    if (!built) throw new LarderError('DEMO', 'no snapshot was built before this step: nothing to export');
    mkdirSync(ctx.outDir, { recursive: true });
    const out = join(ctx.outDir, `${built.set_name}-${built.cutoff}-train.parquet`);
    const t0 = performance.now();
    const r = await exportSnapshot(db, config, {
      set: built.set_name,
      cutoff: built.cutoff,
      out,
      rows: 'train',
    });
    const s = (performance.now() - t0) / 1000;
    ctx.out(
      `  exported ${r.rowCount} training rows of ${built.set_name} @ ${built.cutoff} in ${s.toFixed(2)} s`,
    );
    ctx.out(`    ${relative(process.cwd(), r.path)}  sha256 ${r.sha256.slice(0, 16)}...`);
    ctx.out(`    manifest ${relative(process.cwd(), r.manifestPath)}`);

    const last = (await db.query<{ d: string }>('SELECT max(day)::text AS d FROM sales')).rows[0]!.d;
    const cutoff = formatDay(parseDay(last)! - built.horizon);
    ctx.out(
      `\n  reference forecasts scored at cutoff ${cutoff} (the last with ${built.horizon} days of actuals after it):`,
    );
    const score = await scoreForecasts(db, config, { cutoff, horizon: built.horizon });
    for (const line of formatScoreTable(score)) ctx.out(`  ${line}`);
  },
};
