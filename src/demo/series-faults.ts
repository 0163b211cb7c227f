import { classifyZeroRuns, DEFAULT_STOCKOUT_PARAMS } from '../checks/stockout-rule.js';
import { formatDay } from '../core/days.js';
import type { DemoItem } from './chain-catalog.js';
import type { ChainDays, SeriesDemand, SeriesPrices } from './demand-model.js';
import { zeroChance } from './demand-model.js';
import type { ChainFaultPlan, SeriesFaultPlan } from './fault-plan.js';
import type { Fault, StockoutFault } from './faults-file.js';
import type { Prng } from './prng.js';

/**
 * Injects one series' faults into its true demand and prices, returning what gets written and
 * the ground-truth records. Faults never share a day, and none touches the partial-load day.
 */
export interface SeriesFaultResult {
  /** Units as written (NaN: no row). */
  readonly units: Float64Array;
  /** Weekly prices as written. */
  readonly price: Float64Array;
  /** Day offsets whose line is written twice. */
  readonly duplicateDays: readonly number[];
  readonly records: Fault[];
  /** True units on the partial-load day (NaN when the series has no row that day). */
  readonly partialTrue: number;
  readonly partialDropped: boolean;
}

/** Price slips that enter feeds: a shifted decimal point, a wrong multiple, a dropped digit. */
const SPIKE_FACTORS = [10, 0.1, 4, 0.25, 3.5, 1 / 3.5];

export function applySeriesFaults(
  chain: ChainDays,
  chainPlan: ChainFaultPlan,
  plan: SeriesFaultPlan | undefined,
  item: DemoItem,
  storeId: string,
  demand: SeriesDemand,
  prices: SeriesPrices,
  rng: Prng,
  alpha = DEFAULT_STOCKOUT_PARAMS.alpha,
): SeriesFaultResult {
  const units = Float64Array.from(demand.units);
  const price = Float64Array.from(prices.price);
  const { launch, end } = demand;
  const used = new Uint8Array(chain.n);
  const pd = chainPlan.partialDay;
  used[pd] = 1;
  const records: Fault[] = [];
  const ids = { item_id: item.id, store_id: storeId };
  const day = (i: number) => formatDay(chain.first + i);
  const free = (a: number, b: number) => {
    for (let i = Math.max(0, a - 1); i <= Math.min(chain.n - 1, b + 1); i++) if (used[i]) return false;
    return true;
  };
  const mark = (a: number, b: number) => used.fill(1, a, b + 1);
  const injected: Array<{ start: number; len: number; record: Omit<StockoutFault, 'rule'> }> = [];

  if (plan?.stockout) {
    const lo = launch + 70;
    for (let tries = 0; tries < 60; tries++) {
      const len = rng.intBetween(10, 25);
      const hi = end - len - 7;
      if (hi <= lo) break;
      const start = rng.intBetween(lo, hi);
      if (!free(start, start + len - 1)) continue;
      const model = runModel(demand.mean, item.shape, start, len, alpha);
      if (plan.stockout === 'fast' && !model.detectable && tries < 59) continue;
      mark(start, start + len - 1);
      const trueUnits: number[] = [];
      for (let i = start; i < start + len; i++) {
        trueUnits.push(units[i] as number);
        units[i] = 0;
      }
      injected.push({
        start,
        len,
        record: {
          kind: 'stockout',
          ...ids,
          first_day: day(start),
          last_day: day(start + len - 1),
          length: len,
          true_units: trueUnits,
          placement: plan.stockout,
          model,
        },
      });
      break;
    }
  }

  for (let k = 0; k < (plan?.missing ?? 0); k++) {
    for (let tries = 0; tries < 30; tries++) {
      const len = rng.chance(0.7) ? 1 : rng.intBetween(2, 3);
      const a = rng.intBetween(Math.max(1, launch), end - len - 1);
      if (a + len - 1 >= end || !free(a, a + len - 1)) continue;
      mark(a, a + len - 1);
      const days: string[] = [];
      const trueUnits: number[] = [];
      for (let i = a; i < a + len; i++) {
        days.push(day(i));
        trueUnits.push(units[i] as number);
        units[i] = Number.NaN;
      }
      records.push({ kind: 'missing-days', ...ids, days, true_units: trueUnits });
      break;
    }
  }

  for (let k = 0; k < (plan?.negative ?? 0); k++) {
    for (let tries = 0; tries < 30; tries++) {
      const i = rng.intBetween(launch + 7, end - 1);
      if (i <= launch || !free(i, i)) continue;
      mark(i, i);
      units[i] = -rng.intBetween(1, 3);
      records.push({ kind: 'negative-units', ...ids, day: day(i), units: units[i] as number });
      break;
    }
  }

  const duplicateDays: number[] = [];
  for (let k = 0; k < (plan?.duplicate ?? 0); k++) {
    for (let tries = 0; tries < 30; tries++) {
      const i = rng.intBetween(0, end);
      if (Number.isNaN(units[i]) || !free(i, i)) continue;
      mark(i, i);
      duplicateDays.push(i);
      break;
    }
  }
  duplicateDays.sort((a, b) => a - b);

  const firstWeek = chain.week[launch] as number;
  const lastWeek = chain.week[end] as number;
  for (let k = 0; k < (plan?.priceSpike ?? 0); k++) {
    for (let tries = 0; tries < 40; tries++) {
      const w = rng.intBetween(firstWeek + 14, lastWeek - 1);
      if (w < firstWeek + 14 || w >= lastWeek) break;
      if (prices.promo[w] || prices.promo[w - 1] || prices.promo[w + 1] || price[w] !== prices.price[w])
        continue;
      const factor = rng.pick(SPIKE_FACTORS);
      const truePrice = prices.price[w] as number;
      const written = Math.max(0.01, Math.round(truePrice * factor * 100) / 100);
      price[w] = written;
      records.push({
        kind: 'price-spike',
        ...ids,
        week_start: formatDay(chain.weekStarts[w] as number),
        regular_price: prices.regular[w] as number,
        true_price: truePrice,
        written_price: written,
        ratio: Math.round((written / (prices.regular[w] as number)) * 1e4) / 1e4,
      });
      break;
    }
  }

  const partialTrue = pd <= end ? (units[pd] as number) : Number.NaN;
  const partialDropped = !Number.isNaN(partialTrue) && rng.chance(chainPlan.partialDropShare);
  if (partialDropped) units[pd] = Number.NaN;

  // What the checks will see: the rule on the series exactly as written.
  if (injected.length > 0) {
    const runs = classifyZeroRuns(units.subarray(0, end + 1), { ...DEFAULT_STOCKOUT_PARAMS, alpha });
    for (const inj of injected) {
      const run = runs.find((r) => r.start <= inj.start && r.end >= inj.start);
      const finite = (x: number | undefined) => (x !== undefined && Number.isFinite(x) ? x : null);
      records.push({
        ...inj.record,
        rule: {
          kind: run?.kind ?? 'none',
          run_first_day: day(run?.start ?? inj.start),
          run_last_day: day(run?.end ?? inj.start + inj.len - 1),
          p0: finite(run?.p0),
          k_star: finite(run?.kStar),
          detectable_day: run && run.detectable >= 0 ? day(run.detectable) : null,
        },
      });
    }
  }
  return { units, price, duplicateDays, records, partialTrue, partialDropped };
}

/**
 * Detectability by the generator's own means: the run's chance is the product of the days'
 * zero chances; k* is the first length at which it falls to alpha or below.
 */
export function runModel(mean: Float64Array, shape: number, start: number, len: number, alpha: number) {
  let logP = 0;
  let kStar: number | null = null;
  let rate = 0;
  let p0Sum = 0;
  const logAlpha = Math.log(alpha);
  for (let j = 0; j < len; j++) {
    const mu = mean[start + j] as number;
    const p0 = zeroChance(mu, shape);
    rate += mu;
    p0Sum += p0;
    logP += Math.log(p0);
    if (kStar === null && logP <= logAlpha) kStar = j + 1;
  }
  const round = (x: number) => Math.round(x * 1e4) / 1e4;
  return {
    mean_rate: round(rate / len),
    mean_p0: round(p0Sum / len),
    log10_run_probability: round(logP / Math.LN10),
    k_star: kStar,
    detectable: kStar !== null,
  };
}
