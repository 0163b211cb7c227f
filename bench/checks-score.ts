/**
 * Scores check findings against the demo generator's ground truth (faults.json): per fault kind,
 * recall over the injected faults the checks should catch and precision over the findings that
 * claim that kind. Pure: faults and findings in, a table out.
 */
import type { Finding } from '../src/checks/finding.js';
import type { Fault, FaultKind } from '../src/demo/faults-file.js';

export interface KindScore {
  readonly kind: FaultKind;
  /** Faults injected of this kind. */
  readonly injected: number;
  /** Those the target is about (e.g. stock-outs the generator's own rates make improbable). */
  readonly eligible: number;
  /** Eligible faults matched by at least one finding. */
  readonly detected: number;
  /** Findings of the codes that claim this kind. */
  readonly findings: number;
  /** Those findings that match an injected fault. */
  readonly matched: number;
  /** Findings explained by the data itself rather than a fault (e.g. natural low-volume days). */
  readonly explained: number;
  readonly recall: number;
  readonly precision: number;
  /** Precision counting the explained findings as correct. */
  readonly precisionExplained: number;
}

const overlaps = (a1: string, a2: string, b1: string, b2: string) => a1 <= b2 && b1 <= a2;
const sameSeries = (f: Finding, item: string, store: string) => f.itemId === item && f.storeId === store;

interface Rule {
  readonly codes: readonly string[];
  /** Whether the fault counts for recall. */
  eligible(fault: Fault): boolean;
  match(fault: Fault, finding: Finding): boolean;
  /** A finding that no fault explains but the data does. */
  explained?(finding: Finding): boolean;
}

function rules(naturalLowDays: ReadonlySet<string>): Record<FaultKind, Rule> {
  return {
    stockout: {
      codes: ['stockout', 'open-zero-run'],
      // Runs the generator's true daily means make improbable at the rule's alpha (length >= k*).
      eligible: (f) => f.kind === 'stockout' && f.model.detectable,
      match: (f, x) =>
        f.kind === 'stockout' &&
        sameSeries(x, f.item_id, f.store_id) &&
        overlaps(f.first_day, f.last_day, x.firstDay!, x.lastDay!),
    },
    'price-spike': {
      codes: ['price-spike'],
      // The target covers spikes of at least 3x or at most 1/3 of the regular price.
      eligible: (f) => f.kind === 'price-spike' && (f.ratio >= 3 || f.ratio <= 1 / 3),
      match: (f, x) =>
        f.kind === 'price-spike' && sameSeries(x, f.item_id, f.store_id) && x.weekStart === f.week_start,
    },
    'missing-days': {
      codes: ['series-gaps'],
      eligible: () => true,
      match: (f, x) =>
        f.kind === 'missing-days' &&
        sameSeries(x, f.item_id, f.store_id) &&
        x.code === 'series-gaps' &&
        f.days.some((d) => x.details.days.includes(d)),
    },
    'duplicate-row': {
      codes: ['duplicate-row'],
      eligible: () => true,
      match: (f, x) =>
        f.kind === 'duplicate-row' &&
        x.code === 'duplicate-row' &&
        [x.details.line, x.details.other_line].sort().join() === [...f.lines].sort().join(),
    },
    'negative-units': {
      codes: ['negative-units'],
      eligible: () => true,
      match: (f, x) =>
        f.kind === 'negative-units' &&
        sameSeries(x, f.item_id, f.store_id) &&
        x.firstDay! <= f.day &&
        f.day <= x.lastDay!,
    },
    'unknown-item': {
      codes: ['unknown-item'],
      eligible: () => true,
      match: (f, x) => f.kind === 'unknown-item' && x.itemId === f.item_id,
    },
    'calendar-gap': {
      codes: ['calendar-missing-days'],
      eligible: () => true,
      match: (f, x) => f.kind === 'calendar-gap' && x.firstDay! <= f.day && f.day <= x.lastDay!,
    },
    'partial-load': {
      codes: ['volume-drop'],
      eligible: () => true,
      match: (f, x) => f.kind === 'partial-load' && x.firstDay === f.day,
      explained: (x) => naturalLowDays.has(x.firstDay ?? ''),
    },
  };
}

/** Recall and precision per fault kind. */
export function scoreDetection(
  faults: readonly Fault[],
  findings: readonly Finding[],
  naturalLowDays: readonly string[] = [],
): KindScore[] {
  const table = rules(new Set(naturalLowDays));
  return (Object.keys(table) as FaultKind[]).map((kind) => {
    const rule = table[kind];
    const mine = faults.filter((f) => f.kind === kind);
    const eligible = mine.filter((f) => rule.eligible(f));
    const claims = findings.filter((x) => rule.codes.includes(x.code));
    const detected = eligible.filter((f) => claims.some((x) => rule.match(f, x))).length;
    const matched = claims.filter((x) => mine.some((f) => rule.match(f, x))).length;
    const explained = claims.filter((x) => !mine.some((f) => rule.match(f, x)) && rule.explained?.(x)).length;
    return {
      kind,
      injected: mine.length,
      eligible: eligible.length,
      detected,
      findings: claims.length,
      matched,
      explained,
      recall: eligible.length ? detected / eligible.length : Number.NaN,
      precision: claims.length ? matched / claims.length : Number.NaN,
      precisionExplained: claims.length ? (matched + explained) / claims.length : Number.NaN,
    };
  });
}
