import type { Command } from 'commander';
import { buildSnapshot } from '../../build/build-snapshot.js';
import { formatDay, parseDay } from '../../core/days.js';
import { UsageError } from '../../db/errors.js';
import type { CliContext } from '../context.js';

interface BuildOptions {
  set?: string;
  cutoff?: string;
  from?: string;
  cutoffs?: string;
  backtest?: string;
  every: string;
  concurrency?: string;
  json: boolean;
}

function day(text: string, what: string): number {
  const d = parseDay(text.trim());
  if (d === null) throw new UsageError(`${what}: '${text}' is not an ISO 8601 day (YYYY-MM-DD)`);
  return d;
}

function positive(text: string, what: string): number {
  if (!/^\d+$/.test(text.trim()) || Number(text) < 1)
    throw new UsageError(`${what}: expected a whole number >= 1, got '${text}'`);
  return Number(text);
}

/** The cutoffs a call builds: one, a list, or N backtest folds K days apart ending at --cutoff. */
export function resolveCutoffs(
  o: Pick<BuildOptions, 'cutoff' | 'cutoffs' | 'backtest' | 'every'>,
  latest: () => Promise<number>,
) {
  return (async () => {
    if (o.cutoffs !== undefined) {
      if (o.cutoff !== undefined || o.backtest !== undefined)
        throw new UsageError('--cutoffs cannot be combined with --cutoff or --backtest');
      const list = o.cutoffs.split(',').filter((s) => s.trim() !== '');
      if (!list.length) throw new UsageError('--cutoffs: expected comma-separated days');
      return [...new Set(list.map((s) => day(s, '--cutoffs')))].sort((a, b) => a - b);
    }
    if (o.cutoff === undefined) throw new UsageError('give --cutoff DAY (or latest), or --cutoffs D1,D2,...');
    const last = o.cutoff === 'latest' ? await latest() : day(o.cutoff, '--cutoff');
    if (o.backtest === undefined) return [last];
    const n = positive(o.backtest, '--backtest');
    const k = positive(o.every, '--every');
    return Array.from({ length: n }, (_, i) => last - (n - 1 - i) * k);
  })();
}

/** `larder build`: materialises snapshots of a feature set for one or more cutoffs. */
export function register(program: Command, ctx: CliContext): void {
  program
    .command('build')
    .description(
      'build a leak-free snapshot of a feature set as of a cutoff: training rows up to the cutoff and prediction rows for the next H days; a rebuild replaces the snapshot atomically',
    )
    .option('--set <name>', 'feature set (see larder sets)')
    .option(
      '--cutoff <day>',
      "last day of sales the build may see (YYYY-MM-DD, or 'latest' for the last sales day)",
    )
    .option('--from <day>', "first training day (default: the set's training span)")
    .option('--cutoffs <days>', 'several cutoffs at once, comma-separated (backtest folds)')
    .option('--backtest <n>', 'build n cutoffs ending at --cutoff, --every days apart')
    .option('--every <k>', 'days between backtest cutoffs', '28')
    .option('--concurrency <n>', 'partitions built at once (default: min(pool size, cores))')
    .option('--json', 'print each snapshot as one JSON object per line', false)
    .action(async (o: BuildOptions) => {
      if (!o.set) throw new UsageError('--set NAME is required (larder sets lists them)');
      const config = await ctx.config();
      const db = await ctx.db();
      const cutoffs = await resolveCutoffs(o, async () => {
        const r = await db.query<{ d: string | null }>('SELECT max(day)::text AS d FROM sales');
        if (!r.rows[0]?.d) throw new UsageError('--cutoff latest: no sales are loaded');
        return parseDay(r.rows[0].d)!;
      });
      const concurrency = o.concurrency === undefined ? undefined : positive(o.concurrency, '--concurrency');
      for (const c of cutoffs) {
        const info = await buildSnapshot(
          db,
          config,
          { set: o.set, cutoff: formatDay(c), from: o.from },
          concurrency === undefined ? {} : { concurrency },
        );
        if (o.json) ctx.out(JSON.stringify(info));
        else {
          const secs = (Number(info.timings.totalMs ?? 0) / 1000).toFixed(1);
          ctx.out(
            `${info.set} @ ${info.cutoff}: ${info.tableName}  ${info.rowCount} rows (${info.trainRows} training from ${info.trainFrom}, ${info.predictRows} prediction), ${info.columns.length} features, data ${info.dataFingerprint.slice(0, 12)}, ${secs} s`,
          );
        }
      }
    });
}
