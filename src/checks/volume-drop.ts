import type { z } from 'zod';
import { formatDay } from '../core/days.js';
import { checkParams, defineCheck, intAtLeast, share } from './check-definition.js';
import type { FindingDraft } from './finding.js';
import type { DailyTotals } from './sales-pass.js';

export const volumeDropParams = checkParams(['volume-drop'], {
  /** Flag a day below this share of its baseline (half: a partial load; common practice). */
  minShare: share(0.5),
  /** Same weekdays looked back for the baseline median (four: a month; common practice). */
  weeks: intAtLeast(1, 4),
  /** Baseline weeks that must exist before a day is judged. */
  minWeeks: intAtLeast(1, 4),
});
export type VolumeDropParams = z.output<typeof volumeDropParams>;

export interface VolumeDrop {
  /** Epoch day. */
  readonly day: number;
  readonly units: number;
  readonly median: number;
  readonly weeks: number;
}

/**
 * Days whose chain-wide units fall below `minShare` of the median of the same weekday over the
 * previous `weeks` weeks. Pure: daily totals in, flagged days out. Days with no row at all count
 * as zero units (a missing day is the worst partial load).
 */
export function volumeDrops(
  daily: DailyTotals,
  p: Pick<VolumeDropParams, 'minShare' | 'weeks' | 'minWeeks'>,
): VolumeDrop[] {
  const out: VolumeDrop[] = [];
  const base = new Float64Array(p.weeks);
  for (let i = 0; i < daily.units.length; i++) {
    let n = 0;
    for (let k = 1; k <= p.weeks && i - 7 * k >= 0; k++) base[n++] = daily.units[i - 7 * k]!;
    if (n < p.minWeeks) continue;
    const sorted = base.slice(0, n).sort();
    const h = n >> 1;
    const median = n % 2 ? sorted[h]! : (sorted[h - 1]! + sorted[h]!) / 2;
    const units = daily.units[i]!;
    if (median > 0 && units < p.minShare * median)
      out.push({ day: daily.firstDay + i, units, median, weeks: n });
  }
  return out;
}

/** Chain-wide daily units far below the same weekday's recent median: a partial or missing load. */
export const volumeDrop = defineCheck({
  name: 'volume-drop',
  description:
    'chain-wide units on a day below 50% of the median of the same weekday over the previous 4 weeks',
  codes: {
    'volume-drop': {
      severity: 'block',
      meaning: 'a day whose chain-wide units collapsed: likely a partial load',
    },
  },
  params: volumeDropParams,
  reads: ['sales'],
  async run(db, ctx) {
    const pass = await ctx.sales();
    const drops = volumeDrops(pass.daily, ctx.params);
    if (drops.length === 0) return;
    // Events on the flagged days tell a holiday from a broken load at a glance.
    const ev = await db.query<{ day: string; names: string[] }>(
      `SELECT day, array_agg(name ORDER BY name) AS names FROM events WHERE day = ANY($1::date[]) GROUP BY day`,
      [drops.map((d) => formatDay(d.day))],
    );
    const events = new Map(ev.rows.map((r) => [r.day, r.names]));
    const drafts: FindingDraft[] = drops.map((d) => {
      const ratio = d.units / d.median;
      const names = events.get(formatDay(d.day)) ?? [];
      return {
        code: 'volume-drop',
        firstDay: d.day,
        lastDay: d.day,
        observed: d.units,
        threshold: ctx.params.minShare * d.median,
        rank: 1 - ratio,
        details: { median: d.median, ratio, weeks: d.weeks, events: names },
        message:
          `${d.units} units chain-wide on ${formatDay(d.day)}, ${(100 * ratio).toFixed(0)}% of the ` +
          `${d.weeks}-week same-weekday median ${d.median}${names.length ? ` (events: ${names.join(', ')})` : ''}`,
      };
    });
    await ctx.write(drafts);
  },
});
