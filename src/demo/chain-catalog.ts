import {
  ADJECTIVES,
  CATEGORIES,
  type CategoryTraits,
  REGION_NAMES,
  TOWN_NAMES,
  WEEKLY_SHAPES,
} from './chain-names.js';
import { Prng } from './prng.js';

/** Stream labels: each purpose draws from its own stream of the seed. */
export const STREAM = { catalog: 1, demand: 2, prices: 3, faults: 4, chain: 5 } as const;

export interface DemoRegion {
  readonly id: string;
  readonly index: number;
}

export interface DemoStore {
  readonly id: string;
  readonly index: number;
  readonly regionId: string;
  readonly regionIndex: number;
  /** Demand multiplier (footfall). */
  readonly size: number;
  /** Price multiplier of the store's price zone. */
  readonly priceZone: number;
}

export interface DemoItem {
  readonly id: string;
  readonly index: number;
  readonly name: string;
  readonly dept: string;
  readonly category: string;
  readonly traits: CategoryTraits;
  /** Median units per day in an average store at the regular price. */
  readonly base: number;
  /** Gamma-Poisson shape. */
  readonly shape: number;
  /** Weekday multipliers, ISO weekday - 1, mean 1. */
  readonly weekly: readonly number[];
  readonly yearlyAmp: number;
  readonly yearlyPeak: number;
  readonly elasticity: number;
  /** How strongly the item follows its department's event lifts (1 = fully). */
  readonly eventSens: number;
  /** Extra share of demand on the region's benefit days. */
  readonly benefitLift: number;
  /** Chain regular price at the start of the history. */
  readonly price: number;
  /** Share of weeks on promotion. */
  readonly promoRate: number;
  /** Day offset of the launch (0: on the shelf from the first day). */
  readonly launch: number;
  /** Last day offset with sales rows (n - 1 unless discontinued). */
  readonly end: number;
  /** Sold but left out of items.csv (its row is in corrections/items.csv). */
  readonly unknown: boolean;
}

export interface DemoCatalog {
  readonly regions: readonly DemoRegion[];
  readonly stores: readonly DemoStore[];
  readonly items: readonly DemoItem[];
  readonly departments: readonly string[];
}

export interface CatalogSize {
  readonly stores: number;
  readonly items: number;
  readonly days: number;
}

const slug = (s: string) => s.toLowerCase().replaceAll(/[^a-z0-9]+/g, '-');
const title = (s: string) => s.replaceAll(/\b[a-z]/g, (c) => c.toUpperCase());

/** How many items are sold before their hierarchy rows reach items.csv. */
export function unknownItemCount(items: number): number {
  return Math.min(Math.floor(items / 4), Math.max(2, Math.round(items * 0.005)), 40);
}

/** Builds the chain's regions, stores and items from the seed (deterministic). */
export function buildCatalog(seed: number, size: CatalogSize): DemoCatalog {
  const rng = new Prng(seed, STREAM.catalog);
  const n = size.days;
  const regionCount = Math.min(REGION_NAMES.length, Math.max(1, Math.ceil(size.stores / 3)));
  const regions = REGION_NAMES.slice(0, regionCount).map((id, index) => ({ id, index }));
  const stores: DemoStore[] = [];
  for (let s = 0; s < size.stores; s++) {
    const town = TOWN_NAMES[s % TOWN_NAMES.length] as string;
    const round = Math.floor(s / TOWN_NAMES.length);
    const region = regions[s % regionCount] as DemoRegion;
    stores.push({
      id: round === 0 ? town : `${town}-${round + 1}`,
      index: s,
      regionId: region.id,
      regionIndex: region.index,
      size: rng.logNormal(1, 0.3),
      priceZone: Math.round(rng.between(0.95, 1.07) * 100) / 100,
    });
  }

  // Round-robin over a shuffled category order: even small chains cover many categories.
  const order = CATEGORIES.map((_, i) => i);
  for (let i = order.length - 1; i > 0; i--) {
    const j = rng.int(i + 1);
    [order[i], order[j]] = [order[j] as number, order[i] as number];
  }
  const items: DemoItem[] = [];
  for (let i = 0; i < size.items; i++) {
    const traits = CATEGORIES[order[i % order.length] as number] as CategoryTraits;
    const name = `${rng.pick(ADJECTIVES)} ${rng.pick(traits.nouns)}`;
    const shapeW = WEEKLY_SHAPES[traits.weekly];
    const raw = shapeW.map((w) => w * (1 + 0.04 * rng.normal()));
    const mean = raw.reduce((a, b) => a + b, 0) / 7;
    const [plo, phi] = traits.price;
    const price = Math.max(0.29, Math.round(rng.between(plo, phi) * 10) / 10 - 0.01);
    const launched = n >= 200 && rng.chance(0.12);
    const discontinued = n >= 200 && !launched && rng.chance(0.08);
    items.push({
      id: `${slug(name)}-${String(i + 1).padStart(4, '0')}`,
      index: i,
      name: title(name),
      dept: traits.dept,
      category: traits.id,
      traits,
      base: Math.min(60, Math.max(0.03, rng.logNormal(traits.rate * 0.7, 0.9))),
      shape: rng.between(traits.shape[0], traits.shape[1]),
      weekly: raw.map((w) => w / mean),
      yearlyAmp: traits.yearlyAmp * rng.between(0.6, 1.3),
      yearlyPeak: traits.yearlyPeak + rng.intBetween(-15, 15),
      elasticity: rng.between(traits.elasticity[0], traits.elasticity[1]),
      eventSens: rng.between(0.4, 1.6),
      benefitLift: traits.benefitLift * rng.between(0.5, 1.5),
      price,
      promoRate: rng.chance(0.7) ? rng.between(0.03, 0.1) : 0,
      launch: launched ? rng.intBetween(Math.floor(n * 0.15), Math.floor(n * 0.85)) : 0,
      end: discontinued ? rng.intBetween(Math.floor(n * 0.3), Math.floor(n * 0.95)) : n - 1,
      unknown: false,
    });
  }
  // The unknown items are recent launches whose hierarchy rows had not reached the extract.
  const want = unknownItemCount(size.items);
  const pool = items.filter((it) => it.launch === 0 && it.end === n - 1);
  for (let k = 0; k < want && pool.length > 0; k++) {
    const it = pool.splice(rng.int(pool.length), 1)[0] as DemoItem;
    const launch =
      n - Math.min(150, Math.max(14, Math.floor(n / 4))) + rng.int(Math.max(1, Math.floor(n / 16)));
    items[it.index] = { ...it, launch: Math.min(n - 14, launch), unknown: true };
  }
  const departments = [...new Set(CATEGORIES.map((c) => c.dept))];
  return { regions, stores, items, departments };
}
