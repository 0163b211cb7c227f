/** Public TypeScript API. */
export { defineConfig, loadConfig, type Config, type ConfigInput } from './config/config.js';
export { openDatabase } from './db/open.js';
export type { Db, DbSession } from './db/database.js';
export { buildSnapshot, type SnapshotBuildOptions } from './build/build-snapshot.js';
export { planBuild, type BuildPlan, type BuildRequest } from './build/build-plan.js';
export { buildPartition, type PartitionResult } from './build/build-partition.js';
export { abortBuild, finishBuild } from './build/finish-build.js';
export {
  getSnapshot,
  listSnapshots,
  withSnapshot,
  type SnapshotColumn,
  type SnapshotInfo,
} from './build/snapshot-catalogue.js';
export { auditSnapshot, type AuditOptions, type AuditReport } from './build/leak-audit.js';
export {
  parseFeatureSet,
  resolveFeatureSet,
  type FeatureSetDefinition,
  type FeatureSetInput,
  type ResolvedFeatureSet,
} from './features/feature-set.js';
export { createReader, type Reader, type ReaderOptions } from './serve/reader.js';
export type { FeatureRead, FeatureRow, ReadRequest, SeriesBatch, SetInfo } from './serve/read-types.js';
export { publishSnapshot, type PublishOptions, type PublishResult } from './publish/publish-snapshot.js';
export { openCache } from './publish/open-cache.js';
export type { FeatureCache } from './publish/feature-cache.js';
export {
  exportSnapshot,
  type ExportManifest,
  type ExportOptions,
  type ExportResult,
  type SnapshotManifest,
} from './export/export-snapshot.js';
export {
  openSnapshot,
  type OpenedSnapshot,
  type OpenSnapshotOptions,
  type SnapshotRow,
} from './export/open-snapshot.js';
export { materializeScales, type MaterializeSummary } from './eval/materialize-scales.js';
export { scoreForecasts, type ScoreOptions, type ScoreResult } from './eval/score-forecasts.js';
export { mase, maseScale, rmsse, rmsseScale, wrmsse } from './eval/metrics.js';
export {
  runChecks,
  type CheckRunResult,
  type CheckSummary,
  type RunChecksOptions,
} from './checks/run-checks.js';
export { readFindings, latestRunId, type ReadFindingsOptions } from './checks/read-findings.js';
export { addWaiver, listWaivers, revokeWaiver, type Waiver, type WaiverInput } from './checks/waivers.js';
export { writeReport } from './checks/report/write-report.js';
export {
  classifyZeroRuns,
  zeroProbability,
  criticalRunLength,
  type ZeroRun,
} from './checks/stockout-rule.js';
export type { Finding, FindingCode, FindingDetails, Severity } from './checks/finding.js';
