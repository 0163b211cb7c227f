import { createHash } from 'node:crypto';
import { z } from 'zod';
import { DEFAULT_STOCKOUT_PARAMS, type StockoutParams } from '../checks/stockout-rule.js';
import { parseDay } from '../core/days.js';
import { ConfigError } from '../db/errors.js';
import { calendarParamsSchema, kindSlug } from './calendar.js';
import { encodingsParamsSchema } from './encodings.js';
import {
  FAMILY_NAMES,
  type FamilyName,
  type FeatureColumn,
  type FeatureFamily,
  type SetShape,
} from './family.js';
import { hierarchyParamsSchema } from './hierarchy.js';
import { lagsParamsSchema } from './lags.js';
import { pricesParamsSchema } from './prices.js';
import { FAMILIES } from './registry.js';
import { windowsParamsSchema } from './windows.js';

/** Bumped whenever a family's computed values change, so old snapshots get a different hash. */
export const FEATURE_CODE_VERSION = 1;

const SAFE_IDENT = /^[a-z][a-z0-9_]{0,62}$/;
const RESERVED = new Set(['series_id', 'day', 'origin', 'is_predict', 'label']);
const WEEKDAY_NAMES = ['sunday', 'monday', 'tuesday', 'wednesday', 'thursday', 'friday', 'saturday'] as const;

const identSchema = z.string().regex(SAFE_IDENT, 'a name matching ^[a-z][a-z0-9_]{0,62}$');
const daySchema = z.string().refine((s) => parseDay(s) !== null, 'an ISO 8601 day (YYYY-MM-DD)');

const familyShapes = {
  lags: lagsParamsSchema.optional(),
  windows: windowsParamsSchema.optional(),
  calendar: calendarParamsSchema.optional(),
  prices: pricesParamsSchema.optional(),
  encodings: encodingsParamsSchema.optional(),
  hierarchy: hierarchyParamsSchema.optional(),
} satisfies Record<FamilyName, z.ZodType>;

const familiesSchema = z
  .object(familyShapes)
  .loose()
  .superRefine((v, ctx) => {
    for (const k of Object.keys(v)) {
      if (!(FAMILY_NAMES as readonly string[]).includes(k)) {
        ctx.addIssue({
          code: 'custom',
          path: [k],
          message: `unknown family '${k}' (known: ${FAMILY_NAMES.join(', ')})`,
        });
      }
    }
    if (!FAMILY_NAMES.some((f) => v[f] !== undefined)) {
      ctx.addIssue({ code: 'custom', path: [], message: 'a feature set needs at least one family' });
    }
  })
  .transform((v) => {
    const out: { -readonly [K in keyof typeof familyShapes]?: z.infer<(typeof familyShapes)[K]> } = {};
    for (const f of FAMILY_NAMES) if (v[f] !== undefined) (out as Record<string, unknown>)[f] = v[f];
    return out;
  });

const stockoutSchema = z
  .object({
    alpha: z.number().gt(0).lt(1).default(DEFAULT_STOCKOUT_PARAMS.alpha),
    lookback: z.number().int().min(1).default(DEFAULT_STOCKOUT_PARAMS.lookback),
    minHistory: z.number().int().min(1).default(DEFAULT_STOCKOUT_PARAMS.minHistory),
  })
  .strict();

const featureSetShape = z
  .object({
    name: identSchema,
    description: z.string().optional(),
    /** Days past the cutoff that are forecast (prediction rows C+1 .. C+H). */
    horizon: z.number().int().min(1, 'a horizon of at least 1 day').max(366),
    mode: z.enum(['shift', 'origin']).default('shift'),
    /** Training rows: the `days` days up to the cutoff, or every day from `from`. */
    training: z
      .object({ days: z.number().int().min(1).max(36600).optional(), from: daySchema.optional() })
      .strict()
      .refine((t) => (t.days === undefined) !== (t.from === undefined), 'give exactly one of days or from')
      .default({ days: 730 }),
    /** Origin mode: an origin every this many days, counted back from the cutoff. */
    originEvery: z.number().int().min(1).default(1),
    /** Prices of the weeks up to C + H are known when the build runs (planned prices). */
    pricesKnownAhead: z.boolean().default(false),
    /** Hide stock-out days from sales-derived features (true, or the rule's parameters). */
    stockoutMask: z.union([z.boolean(), stockoutSchema]).default(false),
    families: familiesSchema,
  })
  .strict();

type ParsedSet = z.output<typeof featureSetShape>;

/**
 * One feature set as declared in the config's `sets` list. The cross-field checks run only on
 * a set whose fields all parsed, so each problem is reported once, at its key.
 */
export const featureSetSchema = featureSetShape.pipe(
  z.custom<ParsedSet>().superRefine((set, ctx) => {
    const shape: SetShape = { horizon: set.horizon, mode: set.mode };
    // Shift mode: a prediction row at t = C + H has boundary t - g, which must not pass C.
    if (set.mode === 'shift') {
      const tooSmall = (g: number, path: (string | number)[], feature: string) => {
        if (g < set.horizon) {
          ctx.addIssue({
            code: 'custom',
            path: ['families', ...path],
            message: `feature ${feature} uses shift ${g} < horizon ${set.horizon}: a prediction row at C + ${set.horizon} would need sales ${set.horizon - g} day(s) past the cutoff`,
          });
        }
      };
      const f = set.families;
      f.lags?.days.forEach((k, i) => {
        tooSmall(k, ['lags', 'days', i], `lag_${k}`);
      });
      f.windows?.forEach((w, i) => {
        tooSmall(w.shift, ['windows', i, 'shift'], `${w.stats[0]}_${w.size}d_s${w.shift}`);
      });
      f.encodings?.forEach((e, i) => {
        if (e.shift !== undefined)
          tooSmall(e.shift, ['encodings', i, 'shift'], `enc_${e.groups[0]}_${e.window}d_s${e.shift}`);
      });
      f.hierarchy?.forEach((h, i) => {
        if (h.shift !== undefined)
          tooSmall(h.shift, ['hierarchy', i, 'shift'], `${h.levels[0]}_${h.stats[0]}_${h.size}d_s${h.shift}`);
      });
      set.families.calendar?.features?.forEach((c, i) => {
        if (c === 'days_ahead') {
          ctx.addIssue({
            code: 'custom',
            path: ['families', 'calendar', 'features', i],
            message: 'days_ahead exists only in origin mode',
          });
        }
      });
    }
    set.families.calendar?.eventKinds.forEach((k, i) => {
      if (!SAFE_IDENT.test(`days_since_${kindSlug(k)}`) || kindSlug(k) === '') {
        ctx.addIssue({
          code: 'custom',
          path: ['families', 'calendar', 'eventKinds', i],
          message: `event kind '${k}' does not give a safe column name (days_to_${kindSlug(k)})`,
        });
      }
    });
    // Column names: safe identifiers, none reserved, none twice.
    const seen = new Map<string, FamilyName>();
    for (const name of FAMILY_NAMES) {
      const params = set.families[name];
      if (params === undefined) continue;
      for (const col of FAMILIES[name].columns(params, shape)) {
        if (!SAFE_IDENT.test(col.name) || RESERVED.has(col.name)) {
          ctx.addIssue({
            code: 'custom',
            path: ['families', name],
            message: `feature name '${col.name}' is not a safe SQL identifier (^[a-z][a-z0-9_]{0,62}$, not a key column)`,
          });
        }
        const prev = seen.get(col.name);
        if (prev) {
          ctx.addIssue({
            code: 'custom',
            path: ['families', name],
            message: `duplicate feature name '${col.name}'${prev === name ? '' : ` (also made by ${prev})`}`,
          });
        } else seen.set(col.name, name);
      }
    }
  }),
);

export type FeatureSetInput = z.input<typeof featureSetSchema>;
export type FeatureSetDefinition = z.infer<typeof featureSetSchema>;

/** The config's `sets` section: a list of feature sets with distinct names. */
export const featureSetListSchema = z
  .array(featureSetSchema)
  .superRefine((sets, ctx) => {
    const seen = new Set<string>();
    sets.forEach((s, i) => {
      if (seen.has(s.name))
        ctx.addIssue({
          code: 'custom',
          path: [i, 'name'],
          message: `duplicate feature set name '${s.name}'`,
        });
      seen.add(s.name);
    });
  })
  .default([]);

/** One family of a compiled set, with its parameters and columns. */
export interface CompiledFamily {
  readonly family: FeatureFamily<unknown>;
  readonly params: unknown;
  readonly columns: readonly FeatureColumn[];
}

/** A validated set, ready to build: its columns, definition hash and compiled families. */
export interface ResolvedFeatureSet {
  readonly name: string;
  readonly definition: FeatureSetDefinition;
  readonly shape: SetShape;
  readonly families: readonly CompiledFamily[];
  readonly columns: readonly FeatureColumn[];
  readonly featureNames: readonly string[];
  readonly definitionHash: string;
  /** 0 = Sunday ... 6 = Saturday. */
  readonly weekStart: number;
  /** The stock-out rule's parameters when masking is on. */
  readonly stockout: StockoutParams | null;
  /** Built through `unsafeFeatureSet` (tests of the audit); never from configuration. */
  readonly unsafe: boolean;
}

/** JSON with object keys sorted, so equal definitions hash equally. */
export function canonicalJson(value: unknown): string {
  if (Array.isArray(value)) return `[${value.map(canonicalJson).join(',')}]`;
  if (value !== null && typeof value === 'object') {
    const entries = Object.entries(value as Record<string, unknown>)
      .filter(([, v]) => v !== undefined)
      .sort(([a], [b]) => (a < b ? -1 : a > b ? 1 : 0));
    return `{${entries.map(([k, v]) => `${JSON.stringify(k)}:${canonicalJson(v)}`).join(',')}}`;
  }
  return JSON.stringify(value);
}

/** sha256 of the canonical definition (name and description excluded: they change no value). */
export function definitionHash(def: FeatureSetDefinition, weekStartsOn: string): string {
  const { name: _n, description: _d, ...rest } = def;
  return createHash('sha256')
    .update(canonicalJson({ v: FEATURE_CODE_VERSION, weekStartsOn, set: rest }))
    .digest('hex');
}

function compile(def: FeatureSetDefinition, weekStartsOn: string, unsafe: boolean): ResolvedFeatureSet {
  const shape: SetShape = { horizon: def.horizon, mode: def.mode };
  const families: CompiledFamily[] = [];
  for (const name of FAMILY_NAMES) {
    const params = def.families[name];
    if (params === undefined) continue;
    const family = FAMILIES[name];
    families.push({ family, params, columns: family.columns(params, shape) });
  }
  const columns = families.flatMap((f) => f.columns);
  const weekStart = WEEKDAY_NAMES.indexOf(weekStartsOn as (typeof WEEKDAY_NAMES)[number]);
  if (weekStart < 0) throw new ConfigError(`calendar.weekStartsOn: unknown weekday '${weekStartsOn}'`);
  const sm = def.stockoutMask;
  return Object.freeze({
    name: def.name,
    definition: def,
    shape,
    families,
    columns,
    featureNames: columns.map((c) => c.name),
    definitionHash: definitionHash(def, weekStartsOn) + (unsafe ? '-unsafe' : ''),
    weekStart,
    stockout: sm === false ? null : sm === true ? DEFAULT_STOCKOUT_PARAMS : sm,
    unsafe,
  });
}

/** The named set of the config, validated, with its feature columns and definition hash. */
export function resolveFeatureSet(
  config: {
    readonly sets: readonly FeatureSetDefinition[];
    readonly calendar: { readonly weekStartsOn: string };
    readonly checks?: unknown;
  },
  name: string,
): ResolvedFeatureSet {
  const def = config.sets.find((s) => s.name === name);
  if (!def) {
    const known = config.sets.map((s) => s.name);
    throw new ConfigError(
      `no feature set named '${name}' in the config (${known.length ? `known: ${known.join(', ')}` : 'no sets are configured'})`,
    );
  }
  // `stockoutMask: true` takes the stock-out check's own parameters, so the mask hides exactly
  // the runs the check reports; they are written into the definition (and so into its hash).
  const resolved =
    def.stockoutMask === true ? { ...def, stockoutMask: checkStockoutParams(config.checks) } : def;
  return compile(resolved, config.calendar.weekStartsOn, false);
}

/** The stock-out rule's parameters as configured for the `stockout-zeros` check, else the defaults. */
function checkStockoutParams(checks: unknown): StockoutParams {
  const c = (checks as Record<string, Record<string, unknown> | undefined> | undefined)?.['stockout-zeros'];
  const num = (k: keyof StockoutParams) =>
    typeof c?.[k] === 'number' ? (c[k] as number) : DEFAULT_STOCKOUT_PARAMS[k];
  return { alpha: num('alpha'), lookback: num('lookback'), minHistory: num('minHistory') };
}

/** Validates one set outside a config file (tests, the API); errors name the key. */
export function parseFeatureSet(raw: unknown, origin = 'feature set'): FeatureSetDefinition {
  const r = featureSetSchema.safeParse(raw);
  if (!r.success) {
    const lines = r.error.issues.map(
      (i) => `  ${i.path.length ? i.path.join('.') : '(top level)'}: ${i.message}`,
    );
    throw new ConfigError(`invalid ${origin}:\n${lines.join('\n')}`);
  }
  return r.data;
}

/** Compiles a set from a stored, already validated definition (a build plan). */
export function compileFeatureSet(
  def: FeatureSetDefinition,
  weekStartsOn: string,
  unsafe = false,
): ResolvedFeatureSet {
  return compile(def, weekStartsOn, unsafe);
}

/**
 * Tests only: compiles a definition WITHOUT validation, so deliberately leaky knobs (a window
 * measured past its boundary, an encoding over the whole history) can be built and shown to be
 * caught by the leak audit. Configuration never reaches this.
 */
export function unsafeFeatureSet(def: FeatureSetDefinition, weekStartsOn = 'saturday'): ResolvedFeatureSet {
  return compile(def, weekStartsOn, true);
}
