import type { Command } from 'commander';
import { InvalidArgumentError } from 'commander';
import { EXPORT_FORMATS, type ExportFormat, exportSnapshot } from '../../export/export-snapshot.js';
import type { RowSelection } from '../../export/export-layout.js';
import type { CliContext } from '../context.js';

const ROWS: readonly RowSelection[] = ['train', 'predict', 'all'];

function oneOf<T extends string>(allowed: readonly T[]) {
  return (v: string): T => {
    if (!(allowed as readonly string[]).includes(v))
      throw new InvalidArgumentError(`expected one of ${allowed.join(', ')}`);
    return v as T;
  };
}

/** `--columns a,b --columns c` -> [a, b, c]. */
function columnList(v: string, prev: string[] | undefined): string[] {
  return [
    ...(prev ?? []),
    ...v
      .split(',')
      .map((c) => c.trim())
      .filter(Boolean),
  ];
}

interface Options {
  set: string;
  cutoff: string;
  out: string;
  format: ExportFormat;
  rows: RowSelection;
  from?: string;
  to?: string;
  columns?: string[];
  json: boolean;
}

export function register(program: Command, ctx: CliContext): void {
  program
    .command('export')
    .description(
      'write a snapshot to Parquet, CSV or Arrow IPC, with a manifest (<out>.manifest.json) beside it',
    )
    .requiredOption('--set <name>', 'feature set')
    .requiredOption('--cutoff <day>', "the snapshot's cutoff (YYYY-MM-DD)")
    .requiredOption('--out <path>', 'file to write (replaced only once the new one is complete)')
    .option(
      '--format <format>',
      `file format: ${EXPORT_FORMATS.join(', ')}`,
      oneOf(EXPORT_FORMATS),
      'parquet',
    )
    .option('--rows <rows>', 'training rows, prediction rows or all', oneOf(ROWS), 'all')
    .option('--from <day>', 'first target day to include')
    .option('--to <day>', 'last target day to include')
    .option('--columns <names>', 'feature columns to keep, comma-separated (default: all)', columnList)
    .option('--json', 'print the result as JSON', false)
    .action(async (o: Options) => {
      const db = await ctx.db();
      const r = await exportSnapshot(db, await ctx.config(), {
        set: o.set,
        cutoff: o.cutoff,
        out: o.out,
        format: o.format,
        rows: o.rows,
        ...(o.from ? { from: o.from } : {}),
        ...(o.to ? { to: o.to } : {}),
        ...(o.columns ? { columns: o.columns } : {}),
      });
      if (o.json) ctx.out(JSON.stringify(r, null, 2));
      else
        ctx.out(`exported ${r.rowCount} rows to ${r.path} (sha256 ${r.sha256}); manifest ${r.manifestPath}`);
    });
}
