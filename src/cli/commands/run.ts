import type { Command } from 'commander';
import { UsageError } from '../../db/errors.js';
import { cutoffSpecSchema } from '../../jobs/pipeline-config.js';
import { pipelineStages } from '../../jobs/pipeline-stages.js';
import { type RunOutcome, runPipeline } from '../../jobs/run-pipeline.js';
import { RunBusyError } from '../../jobs/run-lock.js';
import { openJobProcess, stopOnSignals } from '../../jobs/runner-process.js';
import { workKit } from '../../jobs/work-handlers.js';
import type { CliContext } from '../context.js';

/** Exit code when --no-wait finds the run taken by another process. */
export const EXIT_BUSY = 3;

export function exitCodeOf(o: RunOutcome): number {
  return o.status === 'succeeded' || o.status === 'skipped' ? 0 : 1;
}

export function parseConcurrency(text: string | undefined, fallback: number): number {
  if (text === undefined) return fallback;
  const n = Number(text);
  if (!Number.isInteger(n) || n < 0 || n > 64)
    throw new UsageError(`--concurrency: expected 0..64, got '${text}'`);
  return n;
}

export function register(program: Command, ctx: CliContext): void {
  program
    .command('run')
    .description(
      'run the pipeline once: load the watched folder, check (a blocking finding stops here), build, ' +
        'audit, export, publish; recorded in the run history. Exit 0 done or up to date, 1 blocked or ' +
        `failed, 2 usage, ${EXIT_BUSY} busy (--no-wait)`,
    )
    .option(
      '--cutoff <day>',
      "cutoff: a day YYYY-MM-DD, 'latest' (newest sales day), 'yesterday' or 'today'",
      'latest',
    )
    .option('--sets <names>', 'comma-separated feature sets (default: pipeline.sets, else every set)')
    .option('--force', 'rerun even when the last run finished on the same inputs', false)
    .option('--no-wait', 'exit at once if another process is running the same set and cutoff')
    .option(
      '--concurrency <n>',
      'partitions this process builds at once (0: leave them to larder worker); default pipeline.workers.concurrency',
    )
    .action(
      async (o: { cutoff: string; sets?: string; force: boolean; wait: boolean; concurrency?: string }) => {
        const spec = cutoffSpecSchema.safeParse(o.cutoff);
        if (!spec.success)
          throw new UsageError(
            `--cutoff: '${o.cutoff}' is not a day YYYY-MM-DD, 'latest', 'yesterday' or 'today'`,
          );
        const config = await ctx.config();
        const concurrency = parseConcurrency(o.concurrency, config.pipeline.workers.concurrency);
        const proc = await openJobProcess(config, 'run', Math.max(1, concurrency));
        ctx.onClose(() => proc.close());
        const stop = stopOnSignals(proc.reporter, 'finishing the current step, then stopping');
        ctx.onClose(() => stop.dispose());
        const kit = workKit(proc);
        try {
          const outcome = await runPipeline(
            {
              db: proc.db,
              lockDb: proc.lockDb,
              config,
              reporter: proc.reporter,
              holder: proc.holder,
              stages: pipelineStages(kit),
            },
            {
              cutoff: spec.data,
              sets: o.sets
                ?.split(',')
                .map((s) => s.trim())
                .filter(Boolean),
              force: o.force,
              wait: o.wait,
              trigger: 'cli',
              concurrency,
              scheduled: false,
              stop: stop.signal,
            },
          );
          // On a terminal the reporter already said it; a pipe or file gets the outcome on stdout.
          if (!(process.stdout.isTTY && process.stderr.isTTY)) ctx.out(outcome.message);
          ctx.exitCode = exitCodeOf(outcome);
        } catch (err) {
          if (err instanceof RunBusyError) {
            ctx.err(`larder: ${err.message}`);
            ctx.exitCode = EXIT_BUSY;
            return;
          }
          throw err;
        }
      },
    );
}
