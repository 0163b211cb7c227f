import { join } from 'node:path';
import { formatSummary } from '../../checks/format-summary.js';
import { writeReport } from '../../checks/report/write-report.js';
import { runChecks } from '../../checks/run-checks.js';
import type { DemoStep } from '../demo.js';

/**
 * Runs every check over the loaded chain as of its newest sales day (so freshness judges the
 * data against itself), prints the summary and writes the HTML report to the output folder.
 * The demo chain carries injected faults, so findings block; a scheduled refresh would stop
 * here, the demo goes on to show the later stages.
 */
export const checkStep: DemoStep = {
  name: 'check',
  async run(ctx) {
    const last = (await ctx.db.query<{ d: string | null }>('SELECT max(day)::text AS d FROM sales')).rows[0]
      ?.d;
    const result = await runChecks(ctx.db, ctx.config, last ? { cutoff: last } : {});
    for (const line of formatSummary(result, { examples: 2 })) ctx.out(`  ${line}`);
    const path = await writeReport(ctx.db, result.runId, join(ctx.outDir, 'check-report.html'));
    ctx.out(`\n  report: ${path}`);
    if (result.blocking > 0) {
      ctx.out(
        `  ${result.blocking} blocking finding(s): \`larder run\` would stop before the build; the demo continues.`,
      );
    }
  },
};
