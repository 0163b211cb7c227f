import type { Command } from 'commander';
import { DEFAULT_WEIGHT_DAYS, materializeScales } from '../../eval/materialize-scales.js';
import { formatScalesSummary } from '../../eval/score-report.js';
import type { CliContext } from '../context.js';
import { positiveInt } from './score.js';

export function register(program: Command, ctx: CliContext): void {
  program
    .command('scales')
    .description(
      'materialize RMSSE scales and WRMSSE weights of every series of the 12 levels as of a cutoff',
    )
    .requiredOption('--cutoff <day>', 'the cutoff C (YYYY-MM-DD): only sales on or before it are read')
    .option(
      '--weight-days <n>',
      'length of the dollar-sales weight window ending at the cutoff',
      positiveInt,
      DEFAULT_WEIGHT_DAYS,
    )
    .option('--json', 'print the summary as JSON', false)
    .action(async (o: { cutoff: string; weightDays: number; json: boolean }) => {
      const db = await ctx.db();
      const s = await materializeScales(db, await ctx.config(), {
        cutoff: o.cutoff,
        weightDays: o.weightDays,
      });
      if (o.json) ctx.out(JSON.stringify(s, null, 2));
      else for (const line of formatScalesSummary(s)) ctx.out(line);
    });
}
