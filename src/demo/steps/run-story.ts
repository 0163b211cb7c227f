import { join } from 'node:path';
import { runChecks } from '../../checks/run-checks.js';
import type { Config } from '../../config/config.js';
import { addWaiver, type WaiverInput } from '../../checks/waivers.js';
import { LarderError } from '../../db/errors.js';
import { openJobDatabase, processHolder } from '../../jobs/job-database.js';
import { pipelineStages } from '../../jobs/pipeline-stages.js';
import { lineReporter } from '../../jobs/progress.js';
import { type RunOutcome, runPipeline } from '../../jobs/run-pipeline.js';
import { Waker } from '../../jobs/work-notifier.js';
import { WORK_HANDLERS } from '../../jobs/work-handlers.js';
import { loadFiles } from '../../load/load-files.js';
import type { LoadTarget } from '../../load/targets.js';
import type { DemoContext, DemoStep } from '../demo.js';
import { readFaultsFile } from '../faults-file.js';

/** One `larder run --cutoff latest` inside the demo process, with the demo's connections. */
async function demoRun(ctx: DemoContext): Promise<RunOutcome> {
  const { db } = ctx;
  const holder = processHolder('demo');
  // Run locks live on a connection of their own so they never take a build's pool slot.
  const lockDb =
    db.kind === 'server'
      ? await openJobDatabase(ctx.config, holder.app, { poolSize: 1, migrate: false })
      : db;
  const waker = new Waker();
  const kit = { handlers: WORK_HANDLERS, waker, name: `${holder.host}:${holder.pid}` };
  // The run's export lands with the demo's other outputs.
  const exp = ctx.config.pipeline.steps.export;
  const config: Config = exp
    ? {
        ...ctx.config,
        pipeline: {
          ...ctx.config.pipeline,
          steps: { ...ctx.config.pipeline.steps, export: { ...exp, dir: join(ctx.outDir, 'exports') } },
        },
      }
    : ctx.config;
  try {
    return await runPipeline(
      { db, lockDb, config, reporter: lineReporter(ctx.out), holder, stages: pipelineStages(kit) },
      {
        cutoff: 'latest',
        force: false,
        wait: true,
        trigger: 'demo',
        // Each partition holds a lock session and a build transaction; the pool has the rest.
        concurrency: Math.max(1, Math.floor((db.parallelism - 1) / 2)),
        scheduled: false,
      },
    );
  } finally {
    if (lockDb !== db) await lockDb.close();
  }
}

/** The nightly run on the raw extract: the check gate stops it and says why. */
export const firstRunStep: DemoStep = {
  name: 'run (raw extract)',
  async run(ctx) {
    const outcome = await demoRun(ctx);
    if (outcome.status !== 'blocked') {
      throw new LarderError(
        'DEMO',
        `the first run should stop at the check on the injected faults, it ended ${outcome.status}`,
      );
    }
    ctx.out(`  (larder runs show ${outcome.runId} lists every blocking finding)`);
  },
};

/** Reasons a data engineer gives for findings that describe the business, not broken data. */
const REAL: Record<string, (days: readonly string[]) => WaiverInput[]> = {
  'units-sanity': () => [
    {
      check: 'units-sanity',
      code: 'negative-units',
      reason: 'customer returns: on these days more packs came back than were sold',
    },
  ],
  'duplicate-keys': () => [
    {
      check: 'duplicate-keys',
      reason:
        'the extract repeats a few lines exactly; the loader kept one copy of each and rejected the repeats',
    },
  ],
  'stockout-zeros': () => [
    { check: 'stockout-zeros', reason: 'shelf gaps confirmed by the stores; the build masks them' },
  ],
  'volume-drop': (days) =>
    days.map((d) => ({
      check: 'volume-drop',
      fromDay: d,
      toDay: d,
      reason: 'a natural quiet day (a holiday closure), not a partial load',
    })),
};

/**
 * What the data engineer does next: re-pulls the corrected extract (`corrections/`, loaded
 * with mode replace), checks again, and waives only what is real, with reasons.
 */
export const correctStep: DemoStep = {
  name: 'corrections and waivers',
  async run(ctx) {
    const faults = await readFaultsFile(join(ctx.dataDir, 'faults.json'));
    const files: Partial<Record<LoadTarget, string>> = {};
    for (const [table, file] of Object.entries(faults.corrections))
      files[table as LoadTarget] = join(ctx.dataDir, file);
    const loaded = await loadFiles(ctx.db, ctx.config, { files, mode: 'replace' });
    for (const b of loaded.batches) {
      ctx.out(
        `  corrected ${b.target.padEnd(8)} ${String(b.rowsStored).padStart(6)} rows replaced from ${b.file.split(/[\\/]/).pop()}`,
      );
    }
    if (!loaded.ok) throw new LarderError('DEMO', 'the corrections did not load');

    const last = (await ctx.db.query<{ d: string }>('SELECT max(day)::text AS d FROM sales')).rows[0]!.d;
    const check = await runChecks(ctx.db, ctx.config, { cutoff: last });
    const still = check.checks.filter((c) => c.blocking > 0);
    ctx.out(
      `  after the corrections, ${check.blocking} finding(s) still block: ${still.map((c) => `${c.check} ${c.blocking}`).join(', ') || 'none'}`,
    );
    const quiet = new Set(faults.natural_low_volume_days);
    for (const c of still) {
      const make = REAL[c.check];
      if (!make) {
        ctx.out(`  ${c.check}: not waived, this is broken data; the next run will stop again`);
        continue;
      }
      const flagged =
        c.check === 'volume-drop'
          ? check.findings
              .filter((f) => f.check === c.check && f.severity === 'block')
              .map((f) => f.firstDay!)
          : [];
      const unexplained = flagged.filter((d) => !quiet.has(d));
      if (unexplained.length) {
        ctx.out(`  volume-drop on ${unexplained.join(', ')}: no known reason, not waived`);
      }
      for (const w of make(flagged.filter((d) => quiet.has(d)))) {
        const saved = await addWaiver(ctx.db, w);
        ctx.out(
          `  larder waive --check ${w.check}${w.code ? ` --code ${w.code}` : ''}${w.fromDay ? ` --from ${w.fromDay} --to ${w.toDay}` : ''} --reason "${w.reason}"  (waiver ${saved.waiverId})`,
        );
      }
    }
  },
};

/** The same run again: check passes, then build, export and publish. */
export const secondRunStep: DemoStep = {
  name: 'run (corrected)',
  async run(ctx) {
    const outcome = await demoRun(ctx);
    if (outcome.status !== 'succeeded') {
      throw new LarderError(
        'DEMO',
        `the second run should go through, it ended ${outcome.status}: ${outcome.message}`,
      );
    }
  },
};

/** Reads a few series back from the cache the run published to, as a prediction service would. */
export const samplesStep: DemoStep = {
  name: 'sample reads',
  async run(ctx) {
    const { createReader } = await import('../../serve/reader.js');
    const { db, config } = ctx;
    const pub = (
      await db.query<{ set_name: string; version: number; cutoff: string }>(
        `SELECT set_name, version, cutoff::text AS cutoff FROM publishes WHERE status = 'done' ORDER BY publish_id DESC LIMIT 1`,
      )
    ).rows[0];
    if (!pub) throw new LarderError('DEMO', 'no run published a snapshot, nothing to read');
    // The reader opens the configured cache itself (Redis, or this process's in-memory cache).
    const reader = await createReader({ config, db });
    try {
      const first = (await reader.readAll({ set: pub.set_name, batchSize: 100 }).next()).value;
      if (!first) throw new LarderError('DEMO', `set ${pub.set_name} has no series in the cache`);
      const picks = [0, Math.floor(first.items.length / 2), first.items.length - 1].map((i) => ({
        set: pub.set_name,
        item: first.items[i]!,
        store: first.stores[i]!,
        day: first.firstDay,
      }));
      const t0 = performance.now();
      const reads = await reader.getMany(picks);
      ctx.out(
        `  version ${pub.version} of ${pub.set_name} (cutoff ${pub.cutoff}): ${reads.length} reads for ${first.firstDay} ` +
          `in ${(performance.now() - t0).toFixed(1)} ms, ${first.columns.length} features each`,
      );
      for (const r of reads) {
        const shown = Object.entries(r.rows[0]!.features)
          .slice(0, 5)
          .map(([k, v]) => `${k}=${v === null ? 'null' : Number(v.toPrecision(4))}`)
          .join(' ');
        ctx.out(`    ${r.item} @ ${r.store} [${r.source}] ${shown} ...`);
      }
    } finally {
      await reader.close();
    }
  },
};
