import { z } from 'zod';

/** The environment Larder reads; parsed once here and passed down frozen. */
export const envSchema = z.object({
  DATABASE_URL: z.string().min(1).optional(),
  REDIS_URL: z.string().min(1).optional(),
  LARDER_SCHEMA: z
    .string()
    .regex(/^[a-z][a-z0-9_]{0,62}$/, 'a schema name matching ^[a-z][a-z0-9_]{0,62}$')
    .optional(),
  LARDER_CONFIG: z.string().min(1).optional(),
  LARDER_TOKENS: z.string().optional(),
  LARDER_LOG_LEVEL: z.enum(['fatal', 'error', 'warn', 'info', 'debug', 'trace', 'silent']).optional(),
});
export type Env = Readonly<z.infer<typeof envSchema>>;

/** Reads `process.env` (the only place that does), failing with every problem listed. */
export function readEnv(source: NodeJS.ProcessEnv = process.env): Env {
  const picked = Object.fromEntries(
    Object.keys(envSchema.shape).flatMap((k) =>
      source[k] === undefined || source[k] === '' ? [] : [[k, source[k]]],
    ),
  );
  const parsed = envSchema.safeParse(picked);
  if (!parsed.success) {
    const lines = parsed.error.issues.map((i) => `  ${i.path.join('.')}: ${i.message}`);
    throw new Error(`invalid environment:\n${lines.join('\n')}`);
  }
  return Object.freeze(parsed.data);
}
