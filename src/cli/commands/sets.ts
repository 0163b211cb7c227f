import type { Command } from 'commander';
import { resolveFeatureSet } from '../../features/feature-set.js';
import type { CliContext } from '../context.js';

/** `larder sets`: the configured feature sets with their features and definition hashes. */
export function register(program: Command, ctx: CliContext): void {
  program
    .command('sets')
    .description(
      'list the feature sets of the config: horizon, mode, families, feature names, definition hash',
    )
    .option('--json', 'print one JSON object per set', false)
    .action(async (o: { json: boolean }) => {
      const config = await ctx.config();
      if (config.sets.length === 0) {
        if (!o.json) ctx.out('no feature sets configured (add them under `sets` in larder.config.ts)');
        return;
      }
      for (const def of config.sets) {
        const set = resolveFeatureSet(config, def.name);
        const families = set.families.map((f) => f.family.name);
        if (o.json) {
          ctx.out(
            JSON.stringify({
              name: set.name,
              horizon: def.horizon,
              mode: def.mode,
              families,
              features: set.columns.map((c) => ({
                name: c.name,
                family: c.family,
                description: c.description,
              })),
              definitionHash: set.definitionHash,
              definition: def,
            }),
          );
          continue;
        }
        ctx.out(
          `${set.name}  horizon ${def.horizon}  ${def.mode} mode  ${set.columns.length} features  hash ${set.definitionHash.slice(0, 16)}`,
        );
        for (const f of set.families)
          ctx.out(`  ${f.family.name.padEnd(10)} ${f.columns.map((c) => c.name).join(' ')}`);
      }
    });
}
