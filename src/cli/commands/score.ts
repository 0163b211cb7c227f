import { writeFileSync } from 'node:fs';
import { type Command, InvalidArgumentError } from 'commander';
import { displayKey, HIERARCHY_LEVELS } from '../../eval/hierarchy-levels.js';
import { DEFAULT_WEIGHT_DAYS } from '../../eval/materialize-scales.js';
import { type ScoreResult, scoreForecasts } from '../../eval/score-forecasts.js';
import { formatScoreTable, scoreJson } from '../../eval/score-report.js';
import type { CliContext } from '../context.js';

/** Commander parser for a positive integer option. */
export function positiveInt(v: string): number {
  const n = Number(v);
  if (!/^\d+$/.test(v) || !Number.isSafeInteger(n) || n < 1)
    throw new InvalidArgumentError('expected a positive integer');
  return n;
}

interface Options {
  cutoff: string;
  forecasts?: string;
  horizon?: number;
  set?: string;
  weightDays: number;
  json: boolean;
  seriesOut?: string;
  record: boolean;
}

export function register(program: Command, ctx: CliContext): void {
  program
    .command('score')
    .description(
      'score bottom-level forecasts (item_id, store_id, day, value; CSV or Parquet) by RMSSE per series and WRMSSE ' +
        'over the 12 levels, beside the naive and seasonal naive forecasts',
    )
    .requiredOption('--cutoff <day>', 'the cutoff C (YYYY-MM-DD); forecasts cover C+1 .. C+H')
    .option(
      '--forecasts <file>',
      'forecasts file (.csv or .parquet); without it only the reference forecasts are scored',
    )
    .option('--horizon <n>', "horizon H (default: the forecasts' span, or the set's horizon)", positiveInt)
    .option('--set <name>', "take the horizon from this set's snapshot at the cutoff")
    .option(
      '--weight-days <n>',
      'length of the dollar-sales weight window ending at the cutoff',
      positiveInt,
      DEFAULT_WEIGHT_DAYS,
    )
    .option('--json', 'print the result as JSON', false)
    .option('--series-out <file>', "also write every series' scale, weight and RMSSE to this CSV file")
    .option('--no-record', 'do not record the scores in the database')
    .action(async (o: Options) => {
      const db = await ctx.db();
      const r = await scoreForecasts(db, await ctx.config(), {
        cutoff: o.cutoff,
        weightDays: o.weightDays,
        record: o.record,
        ...(o.forecasts ? { forecastsPath: o.forecasts } : {}),
        ...(o.horizon ? { horizon: o.horizon } : {}),
        ...(o.set ? { set: o.set } : {}),
      });
      if (o.seriesOut) writeSeriesCsv(o.seriesOut, r);
      if (o.json) ctx.out(JSON.stringify(scoreJson(r), null, 2));
      else for (const line of formatScoreTable(r)) ctx.out(line);
    });
}

const csvCell = (v: string) => (/[",\n\r]/.test(v) || v !== v.trim() ? `"${v.replaceAll('"', '""')}"` : v);
const numCell = (v: number) => (Number.isNaN(v) ? '' : String(v));

function writeSeriesCsv(path: string, r: ScoreResult): void {
  const head = [
    'level',
    'level_name',
    'key',
    'scale',
    'weight',
    ...r.sources.map((s) => `rmsse_${s.source}`),
  ];
  const lines = [head.map(csvCell).join(',')];
  for (const s of r.series) {
    const name = HIERARCHY_LEVELS[s.level - 1]!.name;
    lines.push(
      [
        String(s.level),
        name,
        csvCell(displayKey(s.key)),
        numCell(s.scale),
        numCell(s.weight),
        ...s.rmsse.map(numCell),
      ].join(','),
    );
  }
  writeFileSync(path, `${lines.join('\n')}\n`);
}
