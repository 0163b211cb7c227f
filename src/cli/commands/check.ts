import type { Command } from 'commander';
import { findingsToJsonLines } from '../../checks/format-json.js';
import { formatSummary } from '../../checks/format-summary.js';
import { writeReport } from '../../checks/report/write-report.js';
import { CHECK_NAMES } from '../../checks/registry.js';
import { runChecks } from '../../checks/run-checks.js';
import { UsageError } from '../../db/errors.js';
import type { CliContext } from '../context.js';

interface CheckOptions {
  cutoff?: string;
  only?: string;
  json: boolean;
  report?: string;
  scheduled: boolean;
  keepCopies: boolean;
  examples: string;
}

/** `larder check`: runs the checks, prints a summary (or JSON lines), exits 1 when anything blocks. */
export function register(program: Command, ctx: CliContext): void {
  program
    .command('check')
    .description(
      'run the data-quality checks over the raw tables; exit 0 when nothing blocks, 1 when a finding blocks, 2 on a usage or config error',
    )
    .option('--cutoff <day>', 'consider data up to this day (YYYY-MM-DD); default: everything stored')
    .option(
      '--only <names>',
      `comma-separated checks to run (default: every enabled check): ${CHECK_NAMES.join(', ')}`,
    )
    .option('--json', 'print one JSON object per finding on stdout (the summary goes to stderr)', false)
    .option('--report <file>', 'write a self-contained HTML report to this file')
    .option('--scheduled', 'judge as a scheduled refresh: stale data blocks', false)
    .option(
      '--keep-copies',
      'store compact copies of the sales and prices read, so later runs read only newer days (larder run always does)',
      false,
    )
    .option('--examples <n>', 'worst findings shown per check in the summary', '3')
    .action(async (o: CheckOptions) => {
      const only =
        o.only === undefined
          ? undefined
          : o.only
              .split(',')
              .map((s) => s.trim())
              .filter(Boolean);
      if (only && only.length === 0) throw new UsageError('--only: expected comma-separated check names');
      const examples = Number(o.examples);
      if (!Number.isInteger(examples) || examples < 0)
        throw new UsageError(`--examples: expected an integer >= 0, got '${o.examples}'`);
      const config = await ctx.config();
      const db = await ctx.db();
      const result = await runChecks(db, config, {
        cutoff: o.cutoff,
        only,
        scheduled: o.scheduled,
        keepCopies: o.keepCopies,
      });
      const summary = formatSummary(result, { examples });
      if (o.json) {
        for (const line of findingsToJsonLines(result.findings)) ctx.out(line);
        for (const line of summary) ctx.err(line);
      } else {
        for (const line of summary) ctx.out(line);
      }
      if (o.report) {
        const path = await writeReport(db, result.runId, o.report);
        (o.json ? ctx.err : ctx.out)(`report written to ${path}`);
      }
      ctx.exitCode = result.blocking > 0 ? 1 : 0;
    });
}
