import { fromCivil, isoWeekday, toCivil } from '../core/days.js';
import { benefitFlags, eventLifts } from './chain-calendar.js';
import type { DemoCatalog, DemoItem, DemoStore } from './chain-catalog.js';
import { STREAM } from './chain-catalog.js';
import { Prng } from './prng.js';

/**
 * The demand model, pure and series by series: a negative binomial (gamma-Poisson) count per day
 * whose mean multiplies the item's base rate by store footfall, weekday, yearly season, a slow
 * trend and level drift, the price against the regular price (elasticity), event and benefit-day
 * lifts, and launch ramp-up or delisting run-down.
 */

/** Per-day context shared by every series of the chain. */
export interface ChainDays {
  readonly first: number;
  readonly n: number;
  /** ISO weekday - 1 (0 = Monday). */
  readonly weekday: Uint8Array;
  readonly yearCos: Float64Array;
  readonly yearSin: Float64Array;
  /** Retail week index of each day. */
  readonly week: Int32Array;
  /** Epoch day each retail week starts on (the first may precede `first`). */
  readonly weekStarts: readonly number[];
  /** Event multipliers per department index. */
  readonly deptLift: readonly Float64Array[];
  /** Benefit-day flags per region index. */
  readonly benefit: readonly Uint8Array[];
}

/** `weekStart` is the ISO weekday (1 = Monday ... 7 = Sunday) retail weeks start on. */
export function chainDays(catalog: DemoCatalog, first: number, n: number, weekStart: number): ChainDays {
  const weekday = new Uint8Array(n);
  const yearCos = new Float64Array(n);
  const yearSin = new Float64Array(n);
  const week = new Int32Array(n);
  const firstWeek = first - ((isoWeekday(first) - weekStart + 7) % 7);
  const weekStarts: number[] = [];
  for (let i = 0; i < n; i++) {
    const d = first + i;
    weekday[i] = isoWeekday(d) - 1;
    const theta = (2 * Math.PI * dayOfYear(d)) / 365.25;
    yearCos[i] = Math.cos(theta);
    yearSin[i] = Math.sin(theta);
    const w = Math.floor((d - firstWeek) / 7);
    week[i] = w;
    if (weekStarts.length === w) weekStarts.push(firstWeek + 7 * w);
  }
  return {
    first,
    n,
    weekday,
    yearCos,
    yearSin,
    week,
    weekStarts,
    deptLift: eventLifts(first, n, catalog.departments),
    benefit: catalog.regions.map((r) => benefitFlags(r.index, first, n)),
  };
}

/** Days since 1 January of the day's year (0-based). */
function dayOfYear(d: number): number {
  return d - fromCivil(toCivil(d).y, 1, 1);
}

/** Weekly prices of one series: what was charged and the regular (non-promotion) price. */
export interface SeriesPrices {
  readonly price: Float64Array;
  readonly regular: Float64Array;
  readonly promo: Uint8Array;
}

const cents = (x: number) => Math.round(x * 100) / 100;
/** Shelf prices end in 9: round to the 10 cents, less one cent. */
const shelf = (x: number) => Math.max(0.09, cents(Math.round(x * 10) / 10 - 0.01));

/**
 * The item's chain price plan (regular price steps, promotion weeks and depths), drawn from the
 * item's own stream so every store sees the same plan; each store applies its price zone and
 * takes part in about nine promotions out of ten.
 */
export function seriesPrices(seed: number, item: DemoItem, store: DemoStore, weeks: number): SeriesPrices {
  const plan = new Prng(seed, STREAM.prices, item.index);
  const storeRng = new Prng(seed, STREAM.prices, item.index, store.index + 1);
  const price = new Float64Array(weeks);
  const regular = new Float64Array(weeks);
  const promo = new Uint8Array(weeks);
  let reg = item.price;
  let cooldown = 0;
  let promoLeft = 0;
  let depth = 0;
  for (let w = 0; w < weeks; w++) {
    if (plan.chance(0.8 / 52)) reg = shelf(reg * plan.between(1.03, 1.09)); // a regular price rise
    if (promoLeft === 0 && cooldown === 0 && plan.chance(item.promoRate)) {
      promoLeft = plan.chance(0.3) ? 2 : 1;
      depth = plan.between(0.15, 0.35);
    }
    const storeReg = shelf(reg * store.priceZone);
    const takesPart = storeRng.chance(0.9);
    regular[w] = storeReg;
    if (promoLeft > 0) {
      promoLeft--;
      cooldown = promoLeft === 0 ? 3 : 0;
      if (takesPart) {
        price[w] = Math.max(0.05, cents(storeReg * (1 - depth)));
        promo[w] = 1;
        continue;
      }
    } else if (cooldown > 0) cooldown--;
    price[w] = storeReg;
  }
  return { price, regular, promo };
}

/** The true daily demand of one series: units (NaN where the series has no row) and means. */
export interface SeriesDemand {
  readonly units: Float64Array;
  readonly mean: Float64Array;
  /** First day offset on the shelf in this store; days before it are stored zeros. */
  readonly launch: number;
  /** Last day offset with a row. */
  readonly end: number;
}

/** Simulates one series; `rng` is the series' own demand stream. */
export function simulateSeries(
  chain: ChainDays,
  item: DemoItem,
  store: DemoStore,
  deptIndex: number,
  prices: SeriesPrices,
  rng: Prng,
): SeriesDemand {
  const n = chain.n;
  const units = new Float64Array(n).fill(Number.NaN);
  const mean = new Float64Array(n);
  const launch = Math.min(item.end, item.launch > 0 ? item.launch + rng.int(10) : 0);
  const end = item.end;
  const peak = (2 * Math.PI * item.yearlyPeak) / 365.25;
  const pc = Math.cos(peak);
  const ps = Math.sin(peak);
  const amp = item.yearlyAmp;
  const growth = 0.05 * rng.normal();
  const base = item.base * store.size;
  const lift = chain.deptLift[deptIndex] as Float64Array;
  const benefit = chain.benefit[store.regionIndex] as Uint8Array;
  const weeks = prices.price.length;
  const priceLift = new Float64Array(weeks);
  for (let w = 0; w < weeks; w++) {
    const ratio = (prices.price[w] as number) / (prices.regular[w] as number);
    let m = ratio ** -item.elasticity;
    if (w > 0 && prices.promo[w - 1] && !prices.promo[w]) m *= 0.9; // shoppers stocked up last week
    priceLift[w] = m;
  }
  let level = 0;
  let lastWeek = -1;
  for (let i = 0; i <= end; i++) {
    if (i < launch) {
      units[i] = 0;
      continue;
    }
    const w = chain.week[i] as number;
    if (w !== lastWeek) {
      level = 0.85 * level + 0.07 * rng.normal();
      lastWeek = w;
    }
    let mu =
      base *
      (item.weekly[chain.weekday[i] as number] as number) *
      (1 + amp * ((chain.yearCos[i] as number) * pc + (chain.yearSin[i] as number) * ps)) *
      Math.exp(level + (growth * i) / 365) *
      (priceLift[w] as number) *
      (1 + item.eventSens * ((lift[i] as number) - 1)) *
      (benefit[i] ? 1 + item.benefitLift : 1);
    if (i - launch < 28 && item.launch > 0) mu *= (i - launch + 1) / 28;
    if (end < n - 1 && end - i < 28) mu *= 0.5 + 0.5 * ((end - i) / 28);
    mean[i] = mu;
    units[i] = rng.negBinomial(mu, item.shape);
  }
  return { units, mean, launch, end };
}

/** Zero-day chance of a gamma-Poisson day with mean `mu` and shape `k`: (k / (k + mu))^k. */
export function zeroChance(mu: number, k: number): number {
  return mu > 0 ? Math.exp(-k * Math.log1p(mu / k)) : 1;
}
