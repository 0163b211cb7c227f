import type { Finding } from './finding.js';

/** The fields `larder check --json` prints for each finding, absent keys as null. */
export interface FindingJson {
  readonly check: string;
  readonly severity: string;
  readonly item_id: string | null;
  readonly store_id: string | null;
  readonly region_id: string | null;
  readonly first_day: string | null;
  readonly last_day: string | null;
  readonly week_start: string | null;
  readonly observed: number | null;
  readonly threshold: number | null;
  readonly message: string;
  readonly code: string;
  readonly run_id: number;
  readonly series_id: number | null;
  readonly detectable_day: string | null;
  readonly waived: boolean;
  readonly waived_by: number | null;
  readonly details: unknown;
}

export function findingToJson(f: Finding): FindingJson {
  return {
    check: f.check,
    severity: f.severity,
    item_id: f.itemId,
    store_id: f.storeId,
    region_id: f.regionId,
    first_day: f.firstDay,
    last_day: f.lastDay,
    week_start: f.weekStart,
    observed: f.observed,
    threshold: f.threshold,
    message: f.message,
    code: f.code,
    run_id: f.runId,
    series_id: f.seriesId,
    detectable_day: f.detectableDay,
    waived: f.waivedBy !== null,
    waived_by: f.waivedBy,
    details: f.details,
  };
}

/** One JSON object per line (JSON Lines), for other tools to consume. */
export function findingsToJsonLines(findings: readonly Finding[]): string[] {
  return findings.map((f) => JSON.stringify(findingToJson(f)));
}
