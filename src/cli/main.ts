import { Command, CommanderError } from 'commander';
import { LarderError } from '../db/errors.js';
import { type CommandModule, createContext } from './context.js';
/**
 * Every CLI command, one module each under `commands/`. Adding a command is one line here.
 * Modules load lazily: a command pulls in only its own stage (measured: importing all of them
 * took `larder init` to 190 MB RSS and ~2.5 s of start-up, which the loader's memory budget felt).
 */
const COMMANDS: Readonly<Record<string, () => Promise<CommandModule>>> = {
  init: () => import('./commands/init.js'),
  load: () => import('./commands/load.js'),
  check: () => import('./commands/check.js'),
  waive: () => import('./commands/waive.js'),
  sets: () => import('./commands/sets.js'),
  build: () => import('./commands/build.js'),
  snapshots: () => import('./commands/snapshots.js'),
  audit: () => import('./commands/audit.js'),
  export: () => import('./commands/export.js'),
  scales: () => import('./commands/scales.js'),
  score: () => import('./commands/score.js'),
  publish: () => import('./commands/publish.js'),
  serve: () => import('./commands/serve.js'),
  run: () => import('./commands/run.js'),
  worker: () => import('./commands/worker.js'),
  schedule: () => import('./commands/schedule.js'),
  runs: () => import('./commands/runs.js'),
  demo: () => import('./commands/demo.js'),
};

/** The command named on the command line (first word that is not an option or its value). */
function commandIn(argv: readonly string[]): string | undefined {
  const args = argv.slice(2);
  for (let i = 0; i < args.length; i++) {
    const a = args[i]!;
    if (a === '-c' || a === '--config') i++;
    else if (!a.startsWith('-')) return a === 'help' ? args[i + 1] : a;
  }
  return undefined;
}

export async function main(argv: readonly string[]): Promise<number> {
  const program = new Command('larder')
    .description(
      'Leak-free features for retail demand forecasting: load, check, build, export, publish, serve.',
    )
    .option('-c, --config <file>', 'config file (default: larder.config.ts|js|json in the working directory)')
    .showHelpAfterError()
    .exitOverride();
  const ctx = createContext(program);
  const named = commandIn(argv);
  const wanted = named && named in COMMANDS ? [named] : Object.keys(COMMANDS);
  for (const m of await Promise.all(wanted.map((k) => COMMANDS[k]!()))) m.register(program, ctx);
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
