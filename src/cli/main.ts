import { Command, CommanderError } from 'commander';
import { LarderError } from '../db/errors.js';
import { type CommandModule, createContext } from './context.js';
import * as audit from './commands/audit.js';
import * as build from './commands/build.js';
import * as check from './commands/check.js';
import * as exportCommand from './commands/export.js';
import * as demo from './commands/demo.js';
import * as init from './commands/init.js';
import * as load from './commands/load.js';
import * as publish from './commands/publish.js';
import * as scales from './commands/scales.js';
import * as score from './commands/score.js';
import * as run from './commands/run.js';
import * as runs from './commands/runs.js';
import * as schedule from './commands/schedule.js';
import * as serve from './commands/serve.js';
import * as sets from './commands/sets.js';
import * as snapshots from './commands/snapshots.js';
import * as waive from './commands/waive.js';
import * as worker from './commands/worker.js';

/** Every CLI command, one module each under `commands/`. Adding a command is one line here. */
const COMMANDS: CommandModule[] = [
  init,
  load,
  check,
  waive,
  sets,
  build,
  snapshots,
  audit,
  exportCommand,
  scales,
  score,
  publish,
  serve,
  run,
  worker,
  schedule,
  runs,
  demo,
];

export async function main(argv: readonly string[]): Promise<number> {
  const program = new Command('larder')
    .description(
      'Leak-free features for retail demand forecasting: load, check, build, export, publish, serve.',
    )
    .option('-c, --config <file>', 'config file (default: larder.config.ts|js|json in the working directory)')
    .showHelpAfterError()
    .exitOverride();
  const ctx = createContext(program);
  for (const m of COMMANDS) m.register(program, ctx);
  try {
    await program.parseAsync([...argv]);
    return ctx.exitCode;
  } catch (err) {
    return reportError(err, ctx.err);
  } finally {
    await ctx.close().catch((e: unknown) => ctx.err(`larder: while closing: ${(e as Error).message}`));
  }
}

/** Usage and config errors exit 2; everything else 1. No stack traces unless LARDER_DEBUG is set. */
function reportError(err: unknown, write: (s: string) => void): number {
  if (err instanceof CommanderError) {
    if (err.code === 'commander.helpDisplayed' || err.code === 'commander.version') return 0;
    if (err.code === 'commander.help') return 0;
    return 2;
  }
  if (err instanceof LarderError) {
    write(`larder: ${err.message}`);
    return err.code === 'CONFIG' || err.code === 'USAGE' ? 2 : 1;
  }
  write(`larder: ${(err as Error)?.message ?? String(err)}`);
  if (process.env.LARDER_DEBUG) write(String((err as Error)?.stack));
  return 1;
}
