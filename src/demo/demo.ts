import { resolve } from 'node:path';
import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import { checkStep } from './steps/check-step.js';
import { exportStep } from './steps/export-step.js';
import { generateStep } from './steps/generate-step.js';
import { loadStep } from './steps/load-step.js';
import { resetStep } from './steps/reset-step.js';
import { correctStep, firstRunStep, samplesStep, secondRunStep } from './steps/run-story.js';
import { summaryStep } from './steps/summary-step.js';

/** What each demo step gets. The demo runs in its own schema, reset at the start. */
export interface DemoContext {
  readonly config: Config;
  readonly db: Db;
  /** Folder holding the generated chain (raw CSVs, faults.json, corrections/). */
  readonly dataDir: string;
  /** Folder for the demo's outputs (report, exports). */
  readonly outDir: string;
  out(line: string): void;
}

export interface DemoStep {
  readonly name: string;
  run(ctx: DemoContext): Promise<void>;
}

/**
 * The demo's steps in order; each pipeline stage adds its own step here. The tail is the data engineer's night: the first run stops at the check, the corrected extract
 * is loaded and what is real waived, the second run builds, exports and publishes; then the
 * training export is scored and a few features are read back from the cache.
 */
export const DEMO_STEPS: DemoStep[] = [
  generateStep,
  resetStep,
  loadStep,
  summaryStep,
  checkStep,
  firstRunStep,
  correctStep,
  secondRunStep,
  exportStep,
  samplesStep,
];

export interface DemoOptions {
  readonly dataDir?: string;
  readonly outDir?: string;
}

/** Runs every demo step, timing each one. */
export async function runDemo(config: Config, db: Db, out: (l: string) => void, opts: DemoOptions = {}) {
  const ctx: DemoContext = {
    config,
    db,
    dataDir: resolve(opts.dataDir ?? 'demo-data'),
    outDir: resolve(opts.outDir ?? 'demo-output'),
    out,
  };
  const timings: Array<[string, number]> = [];
  for (const step of DEMO_STEPS) {
    out(`\n== ${step.name} ==`);
    const t0 = performance.now();
    await step.run(ctx);
    timings.push([step.name, (performance.now() - t0) / 1000]);
  }
  out('\n== time per step ==');
  for (const [name, s] of timings) out(`  ${name.padEnd(24)} ${s.toFixed(2)} s`);
}
