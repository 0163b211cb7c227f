import type { Command } from 'commander';
import { openJobProcess, stopOnSignals } from '../../jobs/runner-process.js';
import { WORK_HANDLERS } from '../../jobs/work-handlers.js';
import { runWorkers } from '../../jobs/worker.js';
import type { CliContext } from '../context.js';
import { parseConcurrency } from './run.js';

export function register(program: Command, ctx: CliContext): void {
  program
    .command('worker')
    .description(
      'claim and build partitions of queued jobs (from larder run or larder schedule on any machine ' +
        'sharing this PostgreSQL) until SIGTERM; an item whose worker vanished is reclaimed after ' +
        'pipeline.workers.timeoutSeconds',
    )
    .option('--concurrency <n>', 'items worked at once; default pipeline.workers.concurrency')
    .option('--exit-when-idle', 'stop when no open job has anything left to claim', false)
    .action(async (o: { concurrency?: string; exitWhenIdle: boolean }) => {
      const config = await ctx.config();
      const concurrency = Math.max(1, parseConcurrency(o.concurrency, config.pipeline.workers.concurrency));
      const proc = await openJobProcess(config, 'worker', concurrency);
      ctx.onClose(() => proc.close());
      const stop = stopOnSignals(proc.reporter, 'finishing the items in hand, then stopping');
      ctx.onClose(() => stop.dispose());
      const w = config.pipeline.workers;
      const name = `${proc.holder.host}:${proc.holder.pid}`;
      proc.reporter.info(`worker ${name} started with ${concurrency} claim loop(s)`, { concurrency });
      const stats = await runWorkers(proc.db, config, WORK_HANDLERS, {
        concurrency,
        name,
        pollMs: w.pollSeconds * 1000,
        heartbeatMs: w.heartbeatSeconds * 1000,
        signal: stop.signal,
        waker: proc.waker,
        ...(o.exitWhenIdle
          ? {
              idleExit: async () =>
                (
                  await proc.db.query<{ n: number }>(
                    `SELECT count(*)::int AS n FROM work_items i JOIN work_jobs j USING (job_id)
                     WHERE j.status = 'open' AND i.status IN ('pending', 'running')`,
                  )
                ).rows[0]!.n === 0,
            }
          : {}),
        onEvent: (e) => {
          if (e.type === 'claimed')
            proc.reporter.info(`claimed ${e.item.kind} ${e.item.partition}`, {
              jobId: e.item.jobId,
              partition: e.item.partition,
              attempt: e.item.attempt,
              worker: e.worker,
            });
          else if (e.type === 'done')
            proc.reporter.info(`done ${e.item.partition}: ${e.rows} rows in ${(e.ms / 1000).toFixed(2)} s`, {
              jobId: e.item.jobId,
              partition: e.item.partition,
              rows: e.rows,
              worker: e.worker,
            });
          else if (e.type === 'failed')
            proc.reporter.warn(`failed ${e.item.partition} (${e.code}): ${e.message}`, {
              jobId: e.item.jobId,
              partition: e.item.partition,
              worker: e.worker,
            });
          else if (e.type === 'lost')
            proc.reporter.warn(`lost ${e.item.partition}: reclaimed by another worker`, {
              jobId: e.item.jobId,
              worker: e.worker,
            });
          else proc.reporter.warn(`${e.code}: ${e.message}`, { worker: e.worker });
        },
      });
      ctx.out(
        `worker ${name} stopped: ${stats.done} items done, ${stats.failed} failed, ${stats.lost} lost, ${stats.rows} rows`,
      );
    });
}
