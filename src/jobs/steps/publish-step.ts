import { openCache } from '../../publish/open-cache.js';
import { publishSnapshot } from '../../publish/publish-snapshot.js';
import type { PipelineStep } from '../pipeline-step.js';

/** Copies the snapshot's prediction rows to the feature cache as a new version, then switches. */
export const publishStep: PipelineStep = {
  name: 'publish',
  perSet: true,
  enabled: (config) => config.pipeline.steps.publish,
  async run(env) {
    const set = env.set!;
    const cache = openCache(env.config);
    try {
      const r = await publishSnapshot(env.db, cache, env.config, { set, cutoff: env.cutoff });
      return {
        status: 'succeeded',
        rows: r.keys,
        details: {
          publishId: r.publishId,
          version: r.version,
          keys: r.keys,
          bytes: r.bytes,
          carried: r.carried,
          previous: r.previous,
          timings: r.timings,
        },
        message: `version ${r.version} is current: ${r.keys} series keys, ${(r.bytes / 1e6).toFixed(1)} MB${r.carried ? ` (${r.carried} carried the kept days over from version ${r.previous})` : ''}`,
      };
    } finally {
      await cache.close();
    }
  },
};
