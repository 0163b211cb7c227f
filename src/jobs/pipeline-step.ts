import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import type { Reporter } from './progress.js';
import type { RunRecord, SetInputs } from './run-store.js';

/** A set's build plan as the build stage made it, plus the inputs it was made from. */
export interface PlannedSet {
  readonly set: string;
  readonly inputs: SetInputs;
  /** The build's JSON-serialisable plan (partitions, staging table, hashes). */
  readonly plan: unknown;
}

/** What the steps of one execution share (in memory; resumes rebuild it). */
export interface RunState {
  readonly plans: ReadonlyMap<string, PlannedSet>;
  /** Set by the check step: its check-run id. */
  checkRunId?: number;
}

export interface RunSettings {
  /** In-process claim loops working the queue (0: only wait for other workers). */
  readonly concurrency: number;
  /** A scheduled run (the freshness check blocks in these). */
  readonly scheduled: boolean;
  readonly force: boolean;
}

/** What a step gets. */
export interface StepEnv {
  readonly db: Db;
  readonly config: Config;
  readonly reporter: Reporter;
  readonly run: RunRecord;
  readonly cutoff: string;
  /** The set for per-set steps; null for the shared ones (check). */
  readonly set: string | null;
  readonly stepId: number;
  /** Aborts when the run lock is lost: stop as soon as possible. */
  readonly signal: AbortSignal;
  readonly state: RunState;
  readonly settings: RunSettings;
  /** Merges details into the step's row now (e.g. a work job id, so a resume finds it). */
  note(details: Readonly<Record<string, unknown>>): Promise<void>;
}

export interface StepResult {
  readonly status: 'succeeded' | 'blocked' | 'skipped';
  readonly rows?: number;
  readonly details?: Readonly<Record<string, unknown>>;
  /** One line for the terminal and the run's record (e.g. what blocked). */
  readonly message?: string;
}

/** One step of the pipeline, e.g. check or publish. */
export interface PipelineStep {
  readonly name: string;
  /** Runs once per feature set (build, export, publish) rather than once per run (check). */
  readonly perSet: boolean;
  /** Whether the configuration asks for this step at all (audit and export are optional). */
  enabled(config: Config): boolean;
  run(env: StepEnv): Promise<StepResult>;
}

/** The result of loading a watched folder before a run. */
export interface LoadOutcome {
  readonly files: readonly { readonly path: string; readonly target: string; readonly rows: number }[];
  readonly rows: number;
  readonly error?: { readonly code: string; readonly message: string };
  readonly startedAt: Date;
  readonly finishedAt: Date;
}

/**
 * The runner's view of the other stages: everything it needs from load, build, check, export
 * and publish, wired in `pipeline-stages.ts`.
 */
export interface PipelineStages {
  /** Set names from the config, in config order. */
  setNames(config: Config): string[];
  /** Loads the files of the watched folder that were not loaded yet. */
  loadWatched(db: Db, config: Config, reporter: Reporter): Promise<LoadOutcome | null>;
  /** Plans a set's build for a cutoff: its inputs and the build plan. */
  plan(db: Db, config: Config, set: string, cutoff: string): Promise<PlannedSet>;
  /** The inputs the current snapshot of (set, cutoff) was built from, if one exists. */
  snapshotInputs(db: Db, set: string, cutoff: string): Promise<SetInputs | null>;
  /** The steps after loading, in order. */
  readonly steps: readonly PipelineStep[];
}
