import { buildWindow } from '../build/build-plan.js';
import type { FingerprintPart } from '../build/fingerprint.js';
import { getSnapshot } from '../build/snapshot-catalogue.js';
import type { Config } from '../config/config.js';
import { day } from '../core/days.js';
import { resolveFeatureSet } from '../features/feature-set.js';
import type { ChangeMark } from './change-log.js';
import type { WorkKit } from './partitioned-job.js';
import { planFingerprint } from './plan-inputs.js';
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

/** What the run's planning keeps for the build step (PlannedSet.plan). */
export interface PlanNotes {
  readonly fingerprintParts: Readonly<Record<string, FingerprintPart>>;
  /** The change log as it stood before the fingerprint: recorded with the snapshot. */
  readonly changeMark: ChangeMark;
  readonly priceBoundary: number;
  readonly fingerprint: {
    readonly from: { readonly snapshotId: number; readonly cutoff: string } | null;
    readonly note: string;
    readonly ms: number;
  };
}

/** The real stages, in pipeline order: check, build, audit, export, publish. */
export function pipelineStages(kit: WorkKit): PipelineStages {
  return {
    setNames: configuredSets,
    loadWatched: loadWatchedFolder,
    async plan(db, config, set, cutoff) {
      // The build's own definition hash and fingerprint (same function, same boundaries), without
      // planning the build: a run with nothing to do must not create staging tables.
      // The fingerprint is advanced from the set's previous snapshot when the change log allows
      // (plan-inputs.ts), which is what keeps an incremental run from rescanning every table.
      const fs = resolveFeatureSet(config, set);
      const c = day(cutoff);
      const w = buildWindow(fs, c, c);
      const t0 = performance.now();
      const p = await planFingerprint(db, set, c, w.priceBoundary, cutoff);
      const planned: PlanNotes = {
        fingerprintParts: p.fp.parts,
        changeMark: p.mark,
        priceBoundary: w.priceBoundary,
        fingerprint: { from: p.from, note: p.note, ms: Math.round(performance.now() - t0) },
      };
      return {
        set,
        inputs: { definitionHash: fs.definitionHash, dataFingerprint: p.fp.fingerprint },
        plan: planned,
      };
    },
    async snapshotInputs(db, set, cutoff) {
      const s = await getSnapshot(db, set, cutoff);
      return s ? { definitionHash: s.definitionHash, dataFingerprint: s.dataFingerprint } : null;
    },
    steps: [checkStep, buildStep(kit), auditStep, exportStep, publishStep],
  };
}
