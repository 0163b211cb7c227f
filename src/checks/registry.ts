import type { AnyCheck } from './check-definition.js';
import { calendarCoverage } from './calendar-coverage.js';
import { duplicateKeys } from './duplicate-keys.js';
import { freshness } from './freshness.js';
import { priceCoverage } from './price-coverage.js';
import { priceSpikes } from './price-spikes.js';
import { seriesGaps } from './series-gaps.js';
import { stockoutZeros } from './stockout-zeros.js';
import { unitsSanity } from './units-sanity.js';
import { unknownReferences } from './unknown-references.js';
import { volumeDrop } from './volume-drop.js';

/** Every check, in the order summaries list them. Adding a check is one file and one line here. */
export const CHECKS: readonly AnyCheck[] = Object.freeze([
  duplicateKeys,
  unknownReferences,
  calendarCoverage,
  seriesGaps,
  stockoutZeros,
  priceSpikes,
  unitsSanity,
  freshness,
  volumeDrop,
  priceCoverage,
] as AnyCheck[]);

export const CHECK_NAMES: readonly string[] = Object.freeze(CHECKS.map((c) => c.name));

/** The check of that name, or undefined. */
export function findCheck(name: string): AnyCheck | undefined {
  return CHECKS.find((c) => c.name === name);
}
