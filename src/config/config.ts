import { existsSync, readFileSync } from 'node:fs';
import { resolve } from 'node:path';
import { pathToFileURL } from 'node:url';
import { z } from 'zod';
import { ConfigError } from '../db/errors.js';
import { type Env, readEnv } from './env.js';
import {
  checksSectionSchema,
  pipelineSectionSchema,
  serveSectionSchema,
  setsSectionSchema,
} from './sections.js';

const ident = z.string().regex(/^[a-z][a-z0-9_]{0,62}$/, 'a name matching ^[a-z][a-z0-9_]{0,62}$');
export const WEEKDAYS = [
  'sunday',
  'monday',
  'tuesday',
  'wednesday',
  'thursday',
  'friday',
  'saturday',
] as const;
export const RAW_TABLES = [
  'items',
  'stores',
  'sales',
  'prices',
  'calendar',
  'events',
  'benefit_days',
] as const;

/** Source column name -> contract column name, or null to ignore an extra column. */
const columnMapSchema = z.record(z.string(), z.string().nullable());

export const configSchema = z
  .object({
    database: z
      .object({
        url: z.string().min(1).optional(),
        schema: ident.default('larder'),
        embeddedDir: z.string().default('.larder/pgdata'),
        poolSize: z.number().int().min(1).max(64).default(4),
      })
      .strict()
      .default({ schema: 'larder', embeddedDir: '.larder/pgdata', poolSize: 4 }),
    redis: z
      .object({ url: z.string().min(1).optional(), prefix: z.string().min(1).max(32).default('larder') })
      .strict()
      .default({ prefix: 'larder' }),
    calendar: z
      .object({ weekStartsOn: z.enum(WEEKDAYS).default('saturday') })
      .strict()
      .default({ weekStartsOn: 'saturday' }),
    load: z
      .object({
        maxRejects: z.number().int().min(0).default(0),
        columns: z.partialRecord(z.enum(RAW_TABLES), columnMapSchema).default({}),
      })
      .strict()
      .default({ maxRejects: 0, columns: {} }),
    checks: checksSectionSchema,
    sets: setsSectionSchema,
    serve: serveSectionSchema,
    pipeline: pipelineSectionSchema,
  })
  .strict();

export type ConfigInput = z.input<typeof configSchema>;
export type Config = Readonly<z.infer<typeof configSchema>>;

/** Typed helper for `larder.config.ts`. */
export function defineConfig(config: ConfigInput): ConfigInput {
  return config;
}

/** Formats zod issues as `key.path: what was expected`, one per line. */
export function formatIssues(error: z.ZodError, origin: string): string {
  const lines = error.issues.map((i) => {
    const key = i.path.length ? i.path.join('.') : '(top level)';
    return `  ${key}: ${i.message}`;
  });
  return `invalid configuration in ${origin}:\n${lines.join('\n')}`;
}

export function parseConfig(raw: unknown, origin: string, env: Env = {}): Config {
  const parsed = configSchema.safeParse(raw ?? {});
  if (!parsed.success) throw new ConfigError(formatIssues(parsed.error, origin));
  const c = parsed.data;
  // Environment overrides the file (twelve-factor style: deploys differ by env, not by file).
  if (env.DATABASE_URL) c.database.url = env.DATABASE_URL;
  if (env.REDIS_URL) c.redis.url = env.REDIS_URL;
  if (env.LARDER_SCHEMA) c.database.schema = env.LARDER_SCHEMA;
  if (env.LARDER_TOKENS) {
    c.serve.tokens = [
      ...c.serve.tokens,
      ...env.LARDER_TOKENS.split(',')
        .map((t) => t.trim())
        .filter(Boolean),
    ];
  }
  return deepFreeze(c);
}

const CANDIDATES = ['larder.config.ts', 'larder.config.js', 'larder.config.json'];

/** Finds and loads the config file (explicit path, LARDER_CONFIG, or one in `cwd`); none is fine. */
export async function loadConfig(
  opts: { path?: string | undefined; cwd?: string; env?: Env } = {},
): Promise<Config> {
  const env = opts.env ?? readEnv();
  const cwd = opts.cwd ?? process.cwd();
  const explicit = opts.path ?? env.LARDER_CONFIG;
  const path = explicit ? resolve(cwd, explicit) : CANDIDATES.map((f) => resolve(cwd, f)).find(existsSync);
  if (explicit && !existsSync(path!)) throw new ConfigError(`config file not found: ${path}`);
  if (!path) return parseConfig({}, 'defaults', env);
  let raw: unknown;
  try {
    if (path.endsWith('.json')) raw = JSON.parse(readFileSync(path, 'utf8'));
    else raw = ((await import(pathToFileURL(path).href)) as { default?: unknown }).default;
  } catch (err) {
    throw new ConfigError(`cannot read config file ${path}: ${(err as Error).message}`, { cause: err });
  }
  return parseConfig(raw, path, env);
}

function deepFreeze<T>(value: T): T {
  if (value && typeof value === 'object' && !Object.isFrozen(value)) {
    Object.freeze(value);
    for (const v of Object.values(value)) deepFreeze(v);
  }
  return value;
}
