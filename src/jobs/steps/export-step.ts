import { mkdir } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import type { PipelineStep } from '../pipeline-step.js';

/** Where a run writes a set's export: `<dir>/<set>-<cutoff>.<format>`, manifest beside it. */
export function exportPath(dir: string, set: string, cutoff: string, format: string): string {
  return join(resolve(dir), `${set}-${cutoff}.${format}`);
}

/** Writes the snapshot to a file with its manifest (optional: `pipeline.steps.export`). */
export const exportStep: PipelineStep = {
  name: 'export',
  perSet: true,
  enabled: (config) => config.pipeline.steps.export !== undefined,
  async run(env) {
    const cfg = env.config.pipeline.steps.export!;
    await mkdir(resolve(cfg.dir), { recursive: true });
    const out = exportPath(cfg.dir, env.set!, env.cutoff, cfg.format);
    // Loaded here: the Arrow library is hundreds of modules, and most runs have no export step.
    const { exportSnapshot } = await import('../../export/export-snapshot.js');
    const r = await exportSnapshot(env.db, env.config, {
      set: env.set!,
      cutoff: env.cutoff,
      out,
      format: cfg.format,
    });
    return {
      status: 'succeeded',
      rows: r.rowCount,
      details: { path: r.path, manifest: r.manifestPath, sha256: r.sha256 },
      message: `${r.rowCount} rows to ${r.path}`,
    };
  },
};
