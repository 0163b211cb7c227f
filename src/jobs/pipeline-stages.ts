import { buildWindow } from '../build/build-plan.js';
import { dataFingerprint } from '../build/fingerprint.js';
import { getSnapshot } from '../build/snapshot-catalogue.js';
import type { Config } from '../config/config.js';
import { day } from '../core/days.js';
import { resolveFeatureSet } from '../features/feature-set.js';
import type { WorkKit } from './partitioned-job.js';
import type { PipelineStages } from './pipeline-step.js';
import { auditStep } from './steps/audit-step.js';
import { buildStep } from './steps/build-step.js';
import { checkStep } from './steps/check-step.js';
import { exportStep } from './steps/export-step.js';
import { publishStep } from './steps/publish-step.js';
import { loadWatchedFolder } from './watched-folder.js';

/** Feature-set names of the config, in config order. */
export function configuredSets(config: Config): string[] {
  return (config.sets as readonly { name?: unknown }[]).flatMap((s) =>
    typeof s?.name === 'string' ? [s.name] : [],
  );
}

/** The real stages, in pipeline order: check, build, audit, export, publish. */
export function pipelineStages(kit: WorkKit): PipelineStages {
  return {
    setNames: configuredSets,
    loadWatched: loadWatchedFolder,
    async plan(db, config, set, cutoff) {
      // The build's own definition hash and fingerprint (same function, same boundaries), without
      // planning the build: a run with nothing to do must not create staging tables.
      const fs = resolveFeatureSet(config, set);
      const c = day(cutoff);
      const w = buildWindow(fs, c, c);
      const fp = await dataFingerprint((fn) => db.session(fn), c, w.priceBoundary);
      return {
        set,
        inputs: { definitionHash: fs.definitionHash, dataFingerprint: fp.fingerprint },
        plan: { fingerprintParts: fp.parts },
      };
    },
    async snapshotInputs(db, set, cutoff) {
      const s = await getSnapshot(db, set, cutoff);
      return s ? { definitionHash: s.definitionHash, dataFingerprint: s.dataFingerprint } : null;
    },
    steps: [checkStep, buildStep(kit), auditStep, exportStep, publishStep],
  };
}
