import type { Command } from 'commander';
import { auditSnapshot } from '../../build/leak-audit.js';
import { UsageError } from '../../db/errors.js';
import type { CliContext } from '../context.js';

interface AuditOptions {
  set?: string;
  cutoff?: string;
  from?: string;
  sample: string;
  probes: string;
  seed: string;
  json: boolean;
}

function whole(text: string, what: string, min: number): number {
  if (!/^\d+$/.test(text.trim()) || Number(text) < min)
    throw new UsageError(`${what}: expected a whole number >= ${min}, got '${text}'`);
  return Number(text);
}

/** `larder audit`: the leak audit of a feature set as of a cutoff; exit 1 when any cell changed. */
export function register(program: Command, ctx: CliContext): void {
  program
    .command('audit')
    .description(
      'leak audit: in a scratch schema, perturb every sales and price value past each cell boundary, rebuild, and report every feature cell that changed (exit 1 if any)',
    )
    .option('--set <name>', 'feature set to audit')
    .option('--cutoff <day>', 'cutoff to audit (YYYY-MM-DD)')
    .option('--from <day>', "first training day (default: the set's training span)")
    .option('--sample <n>', 'series sampled (with all members of their groups)', '100')
    .option('--probes <n>', 'boundaries probed besides the cutoff and the day before it', '6')
    .option('--seed <n>', 'seed of the sample and the probes', '1')
    .option('--json', 'print the report as JSON', false)
    .action(async (o: AuditOptions) => {
      if (!o.set || !o.cutoff) throw new UsageError('audit needs --set NAME and --cutoff DAY');
      const config = await ctx.config();
      const db = await ctx.db();
      const report = await auditSnapshot(
        db,
        config,
        { set: o.set, cutoff: o.cutoff, from: o.from },
        {
          sample: whole(o.sample, '--sample', 1),
          probes: whole(o.probes, '--probes', 0),
          seed: whole(o.seed, '--seed', 0),
          onProgress: o.json ? () => {} : (l) => ctx.err(`  ${l}`),
        },
      );
      if (o.json) ctx.out(JSON.stringify(report));
      else {
        ctx.out(
          `leak audit of ${report.set} @ ${report.cutoff}: ${report.sampledSeries} series sampled, ${report.copiedSeries} copied, ${report.probes.length} probes, ${report.cellsChecked} cells checked`,
        );
        for (const p of report.probes)
          ctx.out(
            `  data after ${p.after} perturbed: ${p.cellsChecked} cells checked, ${p.changed} changed, ${p.missingRows} rows missing`,
          );
        if (report.changedCells === 0) ctx.out('no cell changed: no leak found');
        else {
          ctx.out(`${report.changedCells} cell(s) changed, by feature:`);
          for (const [f, n] of Object.entries(report.byFeature).sort((a, b) => b[1] - a[1]))
            ctx.out(`  ${f.padEnd(32)} ${n}`);
          ctx.out(
            'examples (series, day, origin, feature, boundary, data perturbed after, before -> after):',
          );
          for (const e of report.examples)
            ctx.out(
              `  ${e.seriesId} ${e.day} ${e.origin ?? '-'} ${e.feature} ${e.boundary ?? '-'} ${e.probe} ${e.before} -> ${e.after}`,
            );
        }
      }
      ctx.exitCode = report.changedCells === 0 ? 0 : 1;
    });
}
