import type { Finding } from './finding.js';
import type { CheckRunResult } from './run-checks.js';

export interface SummaryOptions {
  /** Worst examples shown per check. */
  readonly examples?: number;
}

const STATUS_WORD = { passed: 'ok', warned: 'warn', blocked: 'BLOCK', failed: 'FAILED' } as const;

function where(f: Finding): string {
  const keys = [
    f.itemId && `item ${f.itemId}`,
    f.storeId && `store ${f.storeId}`,
    !f.storeId && f.regionId && `region ${f.regionId}`,
  ]
    .filter(Boolean)
    .join(' ');
  return keys ? `${keys}: ` : '';
}

/**
 * The terminal summary of a check run: a table of every check with its counts, then each
 * check's worst findings (waived ones marked). Pure: result in, lines out.
 */
export function formatSummary(r: CheckRunResult, opts: SummaryOptions = {}): string[] {
  const examples = opts.examples ?? 3;
  const lines: string[] = [];
  const verdict =
    r.status === 'passed' ? 'nothing blocks' : r.status === 'failed' ? 'a check FAILED to run' : 'BLOCKED';
  lines.push(
    `check run ${r.runId}${r.cutoff ? ` (cutoff ${r.cutoff})` : ''}: ${verdict}; ` +
      `${r.blocking} blocking, ${r.warnings} warning(s), ${r.infos} info, ${r.waived} waived`,
  );
  lines.push('');
  const w = Math.max(5, ...r.checks.map((c) => c.check.length));
  lines.push(`  ${'check'.padEnd(w)}  status  block   warn   info  waived   time`);
  for (const c of r.checks) {
    lines.push(
      `  ${c.check.padEnd(w)}  ${STATUS_WORD[c.status].padEnd(6)} ${String(c.blocking).padStart(6)} ${String(c.warnings).padStart(6)} ` +
        `${String(c.infos).padStart(6)} ${String(c.waived).padStart(7)} ${(c.elapsedMs / 1000).toFixed(1).padStart(5)}s`,
    );
  }
  const byCheck = new Map<string, Finding[]>();
  for (const f of r.findings) {
    const list = byCheck.get(f.check) ?? [];
    list.push(f);
    byCheck.set(f.check, list);
  }
  for (const c of r.checks) {
    const list = byCheck.get(c.check);
    if (!list?.length) continue;
    lines.push('');
    lines.push(`${c.check} (${list.length} finding${list.length === 1 ? '' : 's'}):`);
    const shown = list.slice(0, examples);
    // Waived findings sort last; show one anyway so an acknowledged problem stays visible.
    const waived = list.find((f) => f.waivedBy !== null);
    if (waived && !shown.includes(waived)) shown.push(waived);
    for (const f of shown) {
      const mark = f.waivedBy !== null ? ` [waived #${f.waivedBy}]` : '';
      lines.push(`  ${f.severity.padEnd(5)} ${f.code}: ${where(f)}${f.message}${mark}`);
    }
    if (list.length > shown.length) lines.push(`  ... and ${list.length - shown.length} more`);
  }
  return lines;
}
