import { readFindings } from '../checks/read-findings.js';
import type { DbSession } from '../db/database.js';
import { getRun, listSteps, type RunRecord, type StepRecord } from './run-store.js';
import { type ItemRecord, listItems } from './work-queue.js';

/** A blocking finding as `larder runs show` lists it. */
export interface BlockingFinding {
  readonly check: string;
  readonly code: string;
  readonly itemId: string | null;
  readonly storeId: string | null;
  readonly firstDay: string | null;
  readonly lastDay: string | null;
  readonly message: string;
}

export interface RunDetail {
  readonly run: RunRecord;
  readonly steps: readonly StepRecord[];
  /** Unwaived blocking findings of the run's newest check step (first `limit`). */
  readonly blocking: readonly BlockingFinding[];
  /** Work items of each build job the run enqueued, by step id. */
  readonly items: ReadonlyMap<number, readonly ItemRecord[]>;
}

export async function runDetail(db: DbSession, runId: number, limit = 50): Promise<RunDetail | undefined> {
  const run = await getRun(db, runId);
  if (!run) return undefined;
  const steps = await listSteps(db, runId);
  const check = [...steps]
    .reverse()
    .find((s) => s.name === 'check' && typeof s.details.checkRunId === 'number');
  let blocking: BlockingFinding[] = [];
  if (check) {
    const found = await readFindings(db, check.details.checkRunId as number, {
      severity: 'block',
      limit: limit * 2,
    });
    blocking = found
      .filter((f) => f.waivedBy === null)
      .slice(0, limit)
      .map((f) => ({
        check: f.check,
        code: f.code,
        itemId: f.itemId,
        storeId: f.storeId,
        firstDay: f.firstDay,
        lastDay: f.lastDay,
        message: f.message,
      }));
  }
  const items = new Map<number, readonly ItemRecord[]>();
  for (const s of steps) {
    if (typeof s.details.jobId === 'number') items.set(s.stepId, await listItems(db, s.details.jobId));
  }
  return { run, steps, blocking, items };
}

/** Seconds between two instants, or since `from` while still running. */
export function seconds(from: Date, to: Date | null, now = new Date()): number {
  return ((to ?? now).getTime() - from.getTime()) / 1000;
}

const pad = (s: string, n: number) => (s.length >= n ? s : s + ' '.repeat(n - s.length));
const when = (d: Date) => d.toISOString().replace('T', ' ').slice(0, 19);

/** `larder runs`: one line per run, newest first. */
export function formatRunList(runs: readonly RunRecord[], now = new Date()): string[] {
  if (runs.length === 0) return ['no runs recorded yet'];
  const lines = [
    `${pad('run', 6)}${pad('status', 12)}${pad('cutoff', 12)}${pad('started (UTC)', 21)}${pad('secs', 9)}${pad('try', 4)}sets / trigger / error`,
  ];
  for (const r of runs) {
    const tail = [
      r.sets.join(','),
      r.trigger,
      r.errorCode ? `${r.errorCode}: ${r.error ?? ''}`.slice(0, 80) : '',
    ].filter(Boolean);
    lines.push(
      `${pad(String(r.runId), 6)}${pad(r.status, 12)}${pad(r.cutoff, 12)}${pad(when(r.startedAt), 21)}` +
        `${pad(seconds(r.startedAt, r.finishedAt, now).toFixed(1), 9)}${pad(String(r.attempt), 4)}${tail.join('  ')}`,
    );
  }
  return lines;
}

/** `larder runs show ID`: the run, each step of each attempt, work items, blocking findings. */
export function formatRunDetail(d: RunDetail, now = new Date()): string[] {
  const r = d.run;
  const lines = [
    `run ${r.runId}: ${r.status}  cutoff ${r.cutoff}  sets ${r.sets.join(', ')}  trigger ${r.trigger}` +
      (r.scheduledFor ? ` (scheduled for ${r.scheduledFor.toISOString()})` : ''),
    `  started ${when(r.startedAt)} UTC, ${r.finishedAt ? `took ${seconds(r.startedAt, r.finishedAt).toFixed(1)} s` : `running for ${seconds(r.startedAt, null, now).toFixed(1)} s`}, attempt ${r.attempt}${r.forced ? ', forced' : ''}`,
    `  held by pid ${r.holderPid ?? '?'} on ${r.holderHost ?? '?'}`,
  ];
  if (r.message) lines.push(`  ${r.message}`);
  if (r.errorCode) lines.push(`  error ${r.errorCode}: ${r.error ?? ''}`);
  for (const [set, inp] of Object.entries(r.inputs)) {
    lines.push(
      `  inputs ${set}: definition ${inp.definitionHash.slice(0, 12)}, data ${inp.dataFingerprint.slice(0, 12)}`,
    );
  }
  lines.push(
    '',
    `${pad('step', 22)}${pad('try', 4)}${pad('status', 11)}${pad('secs', 9)}${pad('rows', 12)}note`,
  );
  for (const s of d.steps) {
    const note = s.error
      ? `${s.errorCode ?? 'ERROR'}: ${s.error}`
      : typeof s.details.message === 'string'
        ? s.details.message
        : typeof s.details.reason === 'string'
          ? s.details.reason
          : '';
    lines.push(
      `${pad(s.setName ? `${s.name} ${s.setName}` : s.name, 22)}${pad(String(s.attempt), 4)}${pad(s.status, 11)}` +
        `${pad(seconds(s.startedAt, s.finishedAt, now).toFixed(2), 9)}${pad(s.rows === null ? '' : String(s.rows), 12)}${note}`,
    );
    const items = d.items.get(s.stepId);
    if (items?.length) {
      const done = items.filter((i) => i.status === 'done').length;
      const retried = items.filter((i) => i.attempts > 1);
      lines.push(
        `${' '.repeat(26)}${done}/${items.length} partitions done` +
          (retried.length
            ? `; retried: ${retried.map((i) => `${i.partition} (${i.attempts} tries)`).join(', ')}`
            : ''),
      );
      for (const i of items.filter((x) => x.status === 'failed')) {
        lines.push(`${' '.repeat(26)}partition ${i.partition} failed: ${i.errorCode ?? ''} ${i.error ?? ''}`);
      }
    }
  }
  if (d.blocking.length) {
    lines.push('', `blocking findings (${d.blocking.length}${d.blocking.length >= 50 ? '+' : ''}):`);
    for (const f of d.blocking) {
      const where = [
        f.itemId && `item ${f.itemId}`,
        f.storeId && `store ${f.storeId}`,
        f.firstDay && (f.lastDay && f.lastDay !== f.firstDay ? `${f.firstDay}..${f.lastDay}` : f.firstDay),
      ]
        .filter(Boolean)
        .join(' ');
      lines.push(`  ${pad(`${f.check}/${f.code}`, 34)}${where ? `${where}: ` : ''}${f.message}`);
    }
  }
  return lines;
}
