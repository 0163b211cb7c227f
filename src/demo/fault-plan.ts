import type { DemoCatalog } from './chain-catalog.js';
import { STREAM } from './chain-catalog.js';
import type { ChainDays } from './demand-model.js';
import { Prng } from './prng.js';

/**
 * Which faults go where, decided before any series is generated so the bookkeeping stays small:
 * chain-wide faults get a day, series faults a series and a count. Days and weeks inside a series
 * are chosen when the series is generated (they need its demand).
 */

/** `fast`: a series whose rate makes a 10-25 day zero run improbable; `slow`: one where it may not be. */
export type StockoutPlacement = 'fast' | 'slow';

export interface SeriesFaultPlan {
  stockout?: StockoutPlacement;
  missing: number;
  negative: number;
  duplicate: number;
  priceSpike: number;
}

export interface ChainFaultPlan {
  /** Day offset of the partial load (most rows of that day missing chain-wide). */
  readonly partialDay: number;
  /** Day offset left out of calendar.csv. */
  readonly calendarGap: number;
  /** Share of the partial day's rows that are missing. */
  readonly partialDropShare: number;
  /** By series key `store.index * items + item.index`. */
  readonly series: ReadonlyMap<number, SeriesFaultPlan>;
}

/** How many faults of each kind a chain of `seriesCount` series gets. */
export function faultCounts(seriesCount: number) {
  return {
    stockouts: Math.max(6, Math.round(seriesCount * 0.12)),
    priceSpikes: Math.max(4, Math.round(seriesCount * 0.05)),
    missing: Math.max(4, Math.round(seriesCount * 0.05)),
    duplicates: Math.max(3, Math.round(seriesCount * 0.02)),
    negatives: Math.max(3, Math.round(seriesCount * 0.02)),
  };
}

const EXPECTED_RATE_FAST = 2.5;
const SLOW_RANGE: readonly [number, number] = [0.3, 1.2];

export function planFaults(seed: number, catalog: DemoCatalog, chain: ChainDays): ChainFaultPlan {
  const rng = new Prng(seed, STREAM.faults);
  const n = chain.n;
  const itemsN = catalog.items.length;
  const counts = faultCounts(catalog.stores.length * itemsN);
  const plans = new Map<number, SeriesFaultPlan>();
  const get = (key: number) => {
    let p = plans.get(key);
    if (!p) {
      p = { missing: 0, negative: 0, duplicate: 0, priceSpike: 0 };
      plans.set(key, p);
    }
    return p;
  };

  const known: Array<{ key: number; rate: number; span: number }> = [];
  for (const store of catalog.stores) {
    for (const item of catalog.items) {
      if (item.unknown) continue;
      known.push({
        key: store.index * itemsN + item.index,
        rate: item.base * store.size,
        span: item.end - item.launch,
      });
    }
  }
  const take = (pool: typeof known, want: number, assign: (p: SeriesFaultPlan) => void) => {
    const left = [...pool];
    for (let k = 0; k < want && left.length > 0; k++) {
      const e = left.splice(rng.int(left.length), 1)[0]!;
      assign(get(e.key));
    }
  };
  const longEnough = known.filter((e) => e.span >= 120);
  const fast = longEnough.filter((e) => e.rate >= EXPECTED_RATE_FAST);
  const slow = longEnough.filter((e) => e.rate >= SLOW_RANGE[0] && e.rate <= SLOW_RANGE[1]);
  const slowWant = Math.round(counts.stockouts * 0.15);
  take(fast, counts.stockouts - slowWant, (p) => {
    p.stockout = 'fast';
  });
  take(
    slow.filter((e) => !plans.get(e.key)?.stockout),
    slowWant,
    (p) => {
      p.stockout = 'slow';
    },
  );
  const spikeable = known.filter((e) => e.span >= 7 * 20);
  take(spikeable, counts.priceSpikes, (p) => {
    p.priceSpike++;
  });
  take(
    known.filter((e) => e.span >= 30),
    counts.missing,
    (p) => {
      p.missing++;
    },
  );
  take(known, counts.duplicates, (p) => {
    p.duplicate++;
  });
  take(
    known.filter((e) => e.span >= 30),
    counts.negatives,
    (p) => {
      p.negative++;
    },
  );

  // The partial load falls late in the history on a day without events, so the volume drop is
  // the fault's alone; the calendar gap falls earlier, on another day.
  const quiet = (i: number) => chain.deptLift.every((l) => l[i] === 1);
  const lo = Math.max(35, Math.floor(n * 0.6));
  const hi = n - 10;
  let partialDay = lo + rng.int(Math.max(1, hi - lo));
  for (let tries = 0; tries < 60 && !quiet(partialDay); tries++)
    partialDay = lo + rng.int(Math.max(1, hi - lo));
  const gapLo = Math.max(2, Math.floor(n * 0.2));
  let calendarGap = gapLo + rng.int(Math.max(1, Math.floor(n * 0.5) - gapLo));
  if (calendarGap === partialDay) calendarGap--;
  return { partialDay, calendarGap, partialDropShare: 0.8, series: plans };
}
