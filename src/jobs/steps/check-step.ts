import { runChecks } from '../../checks/run-checks.js';
import type { PipelineStep } from '../pipeline-step.js';
import { dayInZone } from '../resolve-cutoff.js';

/** Examples of blocking findings printed per check when a run stops at the gate. */
const EXAMPLES_PER_CHECK = 3;

/**
 * The gate: every enabled check up to the cutoff. A blocking finding (one not waived) stops the
 * run before anything is built or published; warnings and infos are recorded and let it pass.
 */
export const checkStep: PipelineStep = {
  name: 'check',
  perSet: false,
  enabled: () => true,
  async run(env) {
    const result = await runChecks(env.db, env.config, {
      cutoff: env.cutoff,
      scheduled: env.settings.scheduled,
      keepCopies: true,
      keepRecent: true,
      readBack: 'blocking',
      today: dayInZone(new Date()),
    });
    env.state.checkRunId = result.runId;
    const details = {
      checkRunId: result.runId,
      blocking: result.blocking,
      warnings: result.warnings,
      infos: result.infos,
      waived: result.waived,
      // Where the sales pass read from: the stored blocks up to a day, `sales` after it.
      scope: { sales: result.salesSource, prices: result.pricesSource },
      checks: result.checks
        .filter((c) => c.blocking + c.warnings > 0)
        .map((c) => ({ check: c.check, status: c.status, blocking: c.blocking, warnings: c.warnings })),
    };
    const rows = result.blocking + result.warnings + result.infos + result.waived;
    if (result.blocking === 0) {
      const message = `passed (check run ${result.runId}): ${result.warnings} warnings, ${result.infos} infos, ${result.waived} waived`;
      return { status: 'succeeded', rows, details, message };
    }
    const blockingChecks = result.checks.filter((c) => c.blocking > 0);
    for (const c of blockingChecks) {
      const examples = result.findings
        .filter((f) => f.check === c.check && f.severity === 'block' && f.waivedBy === null)
        .slice(0, EXAMPLES_PER_CHECK);
      env.reporter.warn(`${c.check}: ${c.blocking} blocking`, { check: c.check, blocking: c.blocking });
      for (const f of examples) env.reporter.warn(`  ${f.message}`, { check: c.check, code: f.code });
    }
    const message =
      `${result.blocking} blocking finding${result.blocking === 1 ? '' : 's'} in check run ${result.runId} (` +
      blockingChecks.map((c) => `${c.check} ${c.blocking}`).join(', ') +
      '); fix the data or `larder waive` what is real, then run again';
    return { status: 'blocked', rows, details, message };
  },
};
