import { auditSnapshot } from '../../build/leak-audit.js';
import type { PipelineStep } from '../pipeline-step.js';

/**
 * The leak audit on a sample of series (optional: `pipeline.steps.audit`). A changed cell means
 * the definition can see past a boundary: the run stops before anything is exported or published.
 */
export const auditStep: PipelineStep = {
  name: 'audit',
  perSet: true,
  enabled: (config) => config.pipeline.steps.audit !== undefined,
  async run(env) {
    const sample = env.config.pipeline.steps.audit!.sample;
    const r = await auditSnapshot(env.db, env.config, { set: env.set!, cutoff: env.cutoff }, { sample });
    const details = {
      sampledSeries: r.sampledSeries,
      cellsChecked: r.cellsChecked,
      changedCells: r.changedCells,
      byFeature: r.byFeature,
    };
    if (r.changedCells > 0) {
      const worst = Object.entries(r.byFeature)
        .sort((a, b) => b[1] - a[1])
        .slice(0, 5)
        .map(([f, n]) => `${f} ${n}`)
        .join(', ');
      return {
        status: 'blocked',
        rows: r.cellsChecked,
        details,
        message: `the leak audit changed ${r.changedCells} of ${r.cellsChecked} cells (${worst}): a feature sees past its boundary`,
      };
    }
    return {
      status: 'succeeded',
      rows: r.cellsChecked,
      details,
      message: `no cell changed: ${r.cellsChecked} cells of ${r.sampledSeries} sampled series over ${r.probes.length} probes`,
    };
  },
};
