import type { Command } from 'commander';
import { UsageError } from '../../db/errors.js';
import { formatRunDetail, formatRunList, runDetail } from '../../jobs/run-report.js';
import { listRuns, type RunStatus } from '../../jobs/run-store.js';
import type { CliContext } from '../context.js';

const STATUSES: readonly RunStatus[] = [
  'running',
  'succeeded',
  'failed',
  'blocked',
  'interrupted',
  'skipped',
];

export function register(program: Command, ctx: CliContext): void {
  const runs = program
    .command('runs')
    .description('pipeline run history, newest first')
    .option('--limit <n>', 'how many runs to list', '20')
    .option('--set <name>', 'only runs that covered this feature set')
    .option('--status <status>', `only runs with this status (${STATUSES.join(', ')})`)
    .option('--json', 'one JSON object per run', false)
    .action(async (o: { limit: string; set?: string; status?: string; json: boolean }) => {
      const limit = Number(o.limit);
      if (!Number.isInteger(limit) || limit < 1)
        throw new UsageError(`--limit: expected a positive integer, got '${o.limit}'`);
      if (o.status && !STATUSES.includes(o.status as RunStatus)) {
        throw new UsageError(`--status: '${o.status}' is not one of ${STATUSES.join(', ')}`);
      }
      const db = await ctx.db();
      const list = await listRuns(db, { limit, set: o.set, status: o.status as RunStatus | undefined });
      if (o.json) for (const r of list) ctx.out(JSON.stringify(r));
      else for (const line of formatRunList(list)) ctx.out(line);
    });

  runs
    .command('show <id>')
    .description('one run: its steps with timings and rows, work items, and the findings that blocked it')
    .option('--json', 'the run, steps and blocking findings as one JSON object', false)
    .action(async (id: string, o: { json: boolean }) => {
      const runId = Number(id);
      if (!Number.isInteger(runId) || runId < 1)
        throw new UsageError(`run id: expected a positive integer, got '${id}'`);
      const db = await ctx.db();
      const detail = await runDetail(db, runId);
      if (!detail) throw new UsageError(`no run ${runId} (see larder runs)`);
      if (o.json) {
        ctx.out(JSON.stringify({ ...detail, items: Object.fromEntries(detail.items) }));
      } else for (const line of formatRunDetail(detail)) ctx.out(line);
    });
}
