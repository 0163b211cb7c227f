import { z } from 'zod';
import { featureSetListSchema } from '../features/feature-set.js';

/**
 * Config sections owned by later pipeline stages. Each stage validates its own section in depth
 * (check parameters by the check registry, feature sets by the build); here they are only shaped.
 */
/** The checks' section (one entry per check, validated by its parameter schema): src/checks/checks-config.ts. */
export { checksConfigSchema as checksSectionSchema } from '../checks/checks-config.js';

export const setsSectionSchema = featureSetListSchema.describe('feature sets');

export const serveSectionSchema = z
  .object({
    port: z.number().int().min(1).max(65535).default(8080),
    host: z.string().default('127.0.0.1'),
    tokens: z.array(z.string().min(16, 'a token of at least 16 characters')).default([]),
    batchLimit: z.number().int().min(1).max(100_000).default(1000),
    /** Seconds an old version stays readable after a publish switches the pointer. */
    graceSeconds: z.number().int().min(1).default(600),
    /** Expiry of a version while it is being written, so a crashed publish cleans up after itself. */
    pendingSeconds: z.number().int().min(60).default(3600),
    /** A Redis command unanswered in this time fails over to PostgreSQL. */
    redisTimeoutMs: z.number().int().min(10).max(60_000).default(250),
    /** How long a reader trusts the pointer it last read (0: read it on every request). */
    pointerCacheMs: z.number().int().min(0).max(60_000).default(1000),
    /** Megabytes of the current versions' packed matrices a reader keeps in process (0: none). */
    nearCacheMb: z.number().int().min(0).max(1_000_000).default(256),
    /**
     * Load every series of a set's current version into those copies in the background, when a
     * read first meets the version (at start and after each switch), if they fit.
     */
    nearCacheWarm: z.boolean().default(true),
  })
  .strict()
  .default({
    port: 8080,
    host: '127.0.0.1',
    tokens: [],
    batchLimit: 1000,
    graceSeconds: 600,
    pendingSeconds: 3600,
    redisTimeoutMs: 250,
    pointerCacheMs: 1000,
    nearCacheMb: 256,
    nearCacheWarm: true,
  });

/** The job runner's section (watched folder, steps, schedules, workers): src/jobs/pipeline-config.ts. */
export { pipelineSectionSchema } from '../jobs/pipeline-config.js';
