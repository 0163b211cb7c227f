import { type Command, Option } from 'commander';
import { UsageError } from '../../db/errors.js';
import { type LoadReport, type LoadRequest, loadFiles } from '../../load/load-files.js';
import type { LoadTarget } from '../../load/targets.js';
import type { CliContext } from '../context.js';

interface LoadOptions {
  items?: string;
  stores?: string;
  sales?: string;
  prices?: string;
  calendar?: string;
  events?: string;
  benefitDays?: string;
  layout: 'auto' | 'long' | 'wide';
  mode: 'append' | 'replace';
  maxRejects?: string;
}

const FILE_OPTIONS: ReadonlyArray<[keyof LoadOptions, LoadTarget, string]> = [
  ['items', 'items', '--items <file>'],
  ['stores', 'stores', '--stores <file>'],
  ['sales', 'sales', '--sales <file>'],
  ['prices', 'prices', '--prices <file>'],
  ['calendar', 'calendar', '--calendar <file>'],
  ['events', 'events', '--events <file>'],
  ['benefitDays', 'benefit_days', '--benefit-days <file>'],
];

export function register(program: Command, ctx: CliContext): void {
  const cmd = program
    .command('load')
    .description(
      'load raw CSV files (.csv or .csv.gz; comma, semicolon or tab) into the raw tables; each file is one ' +
        'load batch that lands whole or not at all',
    );
  for (const [, target, flags] of FILE_OPTIONS) cmd.option(flags, `${target} file`);
  cmd
    .addOption(
      new Option('--layout <layout>', 'sales layout (auto: wide when the header has day columns)')
        .choices(['auto', 'long', 'wide'])
        .default('auto'),
    )
    .addOption(
      new Option(
        '--mode <mode>',
        'append rejects keys already stored; replace swaps the stored rows of the keys in the file',
      )
        .choices(['append', 'replace'])
        .default('append'),
    )
    .option(
      '--max-rejects <n>',
      'rejected rows a file may have and still load (default: config load.maxRejects, 0)',
    )
    .action(async (opts: LoadOptions) => {
      const files: Partial<Record<LoadTarget, string>> = {};
      for (const [key, target] of FILE_OPTIONS) {
        const f = opts[key];
        if (typeof f === 'string') files[target] = f;
      }
      if (Object.keys(files).length === 0) {
        throw new UsageError(
          'load needs at least one file (--items, --stores, --sales, --prices, --calendar, --events, --benefit-days)',
        );
      }
      let maxRejects: number | undefined;
      if (opts.maxRejects !== undefined) {
        maxRejects = Number(opts.maxRejects);
        if (!/^\d+$/.test(opts.maxRejects.trim()))
          throw new UsageError(`--max-rejects must be a whole number >= 0, got '${opts.maxRejects}'`);
      }
      const req: LoadRequest = {
        files,
        mode: opts.mode,
        ...(opts.layout === 'auto' ? {} : { layout: opts.layout }),
        ...(maxRejects === undefined ? {} : { maxRejects }),
      };
      const config = await ctx.config();
      const db = await ctx.db();
      const report = await loadFiles(db, config, req);
      for (const line of formatReport(report)) ctx.out(line);
      if (!report.ok) ctx.exitCode = 1;
    });
}

const int = (n: number) => n.toLocaleString('en-US');

/** The per-file summary the CLI prints. */
export function formatReport(report: LoadReport): string[] {
  const out: string[] = [];
  for (const b of report.batches) {
    const rate = b.seconds > 0 ? Math.round(b.rowsStored / b.seconds) : 0;
    out.push(
      `${b.target.padEnd(12)} ${b.status.padEnd(8)} read ${int(b.rowsRead)}, stored ${int(b.rowsStored)}, ` +
        `rejected ${int(b.rowsRejected)} in ${b.seconds.toFixed(2)} s (${int(rate)} rows/s)  ${b.file}  [batch ${b.batchId}]`,
    );
    for (const r of b.firstRejects) out.push(`    line ${r.line}: ${r.reason}`);
    if (b.rowsRejected > b.firstRejects.length) {
      out.push(
        `    ... ${int(b.rowsRejected - b.firstRejects.length)} more in rejected_rows (batch ${b.batchId})`,
      );
    }
    if (b.status === 'rejected') out.push('    nothing from this file was stored (see --max-rejects)');
  }
  return out;
}
