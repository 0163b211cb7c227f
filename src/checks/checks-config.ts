import { z } from 'zod';
import { CHECK_NAMES, CHECKS } from './registry.js';

/**
 * The `checks` section of the config: per check `{ enabled?, severity?, ...thresholds }`,
 * validated by that check's own parameter schema, so an error names the key
 * (`checks.price-spikes.threshold: expected a number > 0`).
 */
export const checksConfigSchema = z
  .object(Object.fromEntries(CHECKS.map((c) => [c.name, c.params.prefault({})])), {
    error: (iss) =>
      iss.code === 'unrecognized_keys'
        ? `unknown check ${iss.keys.map((k) => `'${k}'`).join(', ')} (known: ${CHECK_NAMES.join(', ')})`
        : undefined,
  })
  .strict()
  .prefault({})
  .describe('per-check settings: { "<check-name>": { enabled, severity, ...parameters } }');

export type ChecksConfig = z.output<typeof checksConfigSchema>;
