import type { Command } from 'commander';
import { UsageError } from '../../db/errors.js';
import { pipelineStages } from '../../jobs/pipeline-stages.js';
import { runPipeline } from '../../jobs/run-pipeline.js';
import { openJobProcess, stopOnSignals } from '../../jobs/runner-process.js';
import { runScheduler, scheduleTrigger } from '../../jobs/scheduler.js';
import { workKit } from '../../jobs/work-handlers.js';
import type { CliContext } from '../context.js';
import { parseConcurrency } from './run.js';

export function register(program: Command, ctx: CliContext): void {
  program
    .command('schedule')
    .description(
      'run the pipelines of pipeline.schedules on their cron expressions, one run at a time, until ' +
        'SIGTERM (which lets the current step finish); firings missed while no scheduler ran are only run with --catch-up',
    )
    .option('--catch-up', 'run the firings missed since each schedule last ran, oldest first', false)
    .option(
      '--concurrency <n>',
      'partitions this process builds at once; default pipeline.workers.concurrency',
    )
    .action(async (o: { catchUp: boolean; concurrency?: string }) => {
      const config = await ctx.config();
      const schedules = config.pipeline.schedules;
      if (schedules.length === 0) throw new UsageError('no schedules: add pipeline.schedules to the config');
      const concurrency = parseConcurrency(o.concurrency, config.pipeline.workers.concurrency);
      const proc = await openJobProcess(config, 'schedule', Math.max(1, concurrency));
      ctx.onClose(() => proc.close());
      const stop = stopOnSignals(proc.reporter, 'finishing the current step, then stopping');
      ctx.onClose(() => stop.dispose());
      const kit = workKit(proc);
      const runner = {
        db: proc.db,
        lockDb: proc.lockDb,
        config,
        reporter: proc.reporter,
        holder: proc.holder,
        stages: pipelineStages(kit),
      };
      proc.reporter.info(
        `scheduler started: ${schedules.map((s) => `${s.name} '${s.cron}'${s.timezone ? ` ${s.timezone}` : ''}`).join(', ')}`,
      );
      await runScheduler({
        db: proc.db,
        schedules,
        catchUp: o.catchUp,
        signal: stop.signal,
        reporter: proc.reporter,
        async execute(fire) {
          const outcome = await runPipeline(runner, {
            cutoff: fire.schedule.cutoff,
            sets: fire.schedule.sets,
            force: false,
            wait: true,
            trigger: scheduleTrigger(fire.schedule.name),
            scheduledFor: fire.at,
            now: fire.at,
            timeZone: fire.schedule.timezone,
            concurrency,
            scheduled: true,
            stop: stop.signal,
          });
          ctx.out(`${fire.schedule.name} ${fire.at.toISOString()}: ${outcome.message}`);
        },
      });
      ctx.out('scheduler stopped');
    });
}
