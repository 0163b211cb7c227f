import { HIERARCHY_LEVELS } from './hierarchy-levels.js';
import type { ScoreResult } from './score-forecasts.js';
import type { MaterializeSummary } from './materialize-scales.js';

const num = (v: number, digits = 4) => (Number.isNaN(v) ? '-' : v.toFixed(digits));

/** The score as a terminal table: one row per level, one column per forecast source. */
export function formatScoreTable(r: ScoreResult): string[] {
  const names = r.sources.map((s) => s.source);
  const widths = names.map((n) => Math.max(10, n.length));
  const head = `level  ${'name'.padEnd(18)} ${'series'.padStart(7)}  ${names.map((n, i) => n.padStart(widths[i]!)).join('  ')}`;
  const lines = [
    `WRMSSE as of ${r.cutoff}: horizon ${r.horizon} days, weights from dollar sales over the last ${r.weightDays} days`,
    head,
    '-'.repeat(head.length),
  ];
  for (const level of HIERARCHY_LEVELS) {
    const cells = r.sources.map((s, i) => num(s.levels[level.level - 1]!.score).padStart(widths[i]!));
    const series = r.sources[0]!.levels[level.level - 1]!.series;
    lines.push(
      `${String(level.level).padStart(5)}  ${level.name.padEnd(18)} ${String(series).padStart(7)}  ${cells.join('  ')}`,
    );
  }
  lines.push('-'.repeat(head.length));
  lines.push(
    `${''.padStart(5)}  ${'WRMSSE'.padEnd(18)} ${''.padStart(7)}  ${r.sources.map((s, i) => num(s.wrmsse).padStart(widths[i]!)).join('  ')}`,
  );
  const excluded = r.sources[0]!.levels.filter((l) => l.excluded > 0);
  for (const l of excluded) {
    lines.push(`note: level ${l.level} ${l.name}: ${l.excluded} series without a scale or weight left out`);
  }
  for (const p of r.problems) lines.push(`note: ${p}`);
  return lines;
}

/** The score as JSON-ready data (NaN becomes null); per-series results only when asked. */
export function scoreJson(r: ScoreResult, withSeries = false): unknown {
  const n = (v: number) => (Number.isNaN(v) ? null : v);
  return {
    cutoff: r.cutoff,
    horizon: r.horizon,
    weightDays: r.weightDays,
    materialized: r.materialized,
    sources: r.sources.map((s) => ({
      source: s.source,
      wrmsse: n(s.wrmsse),
      levels: s.levels.map((l) => ({ ...l, score: n(l.score) })),
    })),
    problems: r.problems,
    ...(withSeries
      ? {
          series: r.series.map((s) => ({
            level: s.level,
            key: s.key.split('\u001f'),
            scale: n(s.scale),
            weight: n(s.weight),
            rmsse: Object.fromEntries(r.sources.map((src, i) => [src.source, n(s.rmsse[i]!)])),
          })),
        }
      : {}),
  };
}

/** A materialization summary for the terminal. */
export function formatScalesSummary(s: MaterializeSummary): string[] {
  const lines = [
    `scales and weights as of ${s.cutoff} (weight window ${s.weightDays} days): ${s.evaluatedSeries} of ${s.bottomSeries} bottom series evaluated, dollar sales ${s.totalDollars.toFixed(2)}`,
    `level  ${'name'.padEnd(18)} ${'series'.padStart(7)} ${'no scale'.padStart(9)}`,
  ];
  for (const l of s.levels) {
    lines.push(
      `${String(l.level).padStart(5)}  ${l.name.padEnd(18)} ${String(l.series).padStart(7)} ${String(l.noScale).padStart(9)}`,
    );
  }
  for (const p of s.problems) lines.push(`note: ${p}`);
  return lines;
}
