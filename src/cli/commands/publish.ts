import type { Command } from 'commander';
import { UsageError } from '../../db/errors.js';
import { openCache } from '../../publish/open-cache.js';
import { publishSnapshot } from '../../publish/publish-snapshot.js';
import type { CliContext } from '../context.js';

/** Parses a positive integer option, naming the option when it is not one. */
export function positiveIntOption(name: string) {
  return (v: string): number => {
    const n = Number(v);
    if (!/^\d+$/.test(v) || !Number.isSafeInteger(n) || n < 1) {
      throw new UsageError(`${name} must be a positive integer, got '${v}'`);
    }
    return n;
  };
}

export function register(program: Command, ctx: CliContext): void {
  program
    .command('publish')
    .description("copy a snapshot's prediction rows to the cache as a new version, then switch the set to it")
    .requiredOption('--set <name>', 'feature set name')
    .requiredOption('--cutoff <day>', 'cutoff of the snapshot to publish (YYYY-MM-DD)')
    .option(
      '--grace <seconds>',
      'seconds the previous version stays readable (default: serve.graceSeconds, 600)',
      positiveIntOption('--grace'),
    )
    .option(
      '--redis <url>',
      'Redis to publish to (default: REDIS_URL or redis.url; none: the in-process cache)',
    )
    .option(
      '--no-carry',
      'read every prediction row from the snapshot, not only those a refresh did not keep (the kept days are otherwise copied from the current version)',
    )
    .option('--json', 'print the result as JSON', false)
    .action(
      async (o: {
        set: string;
        cutoff: string;
        grace?: number;
        redis?: string;
        carry: boolean;
        json: boolean;
      }) => {
        const config = await ctx.config();
        const db = await ctx.db();
        const cache = openCache(config, { url: o.redis });
        ctx.onClose(() => cache.close());
        if (cache.kind === 'memory') {
          ctx.err(
            'larder: no Redis configured (REDIS_URL): publishing to the in-process cache, which ends with this command',
          );
        }
        const res = await publishSnapshot(db, cache, config, {
          set: o.set,
          cutoff: o.cutoff,
          ...(o.grace ? { graceSeconds: o.grace } : {}),
          carry: o.carry,
        });
        if (o.json) {
          ctx.out(JSON.stringify(res));
          return;
        }
        const mb = (res.bytes / 1e6).toFixed(1);
        ctx.out(
          `published set ${res.set} cutoff ${res.cutoff} as version ${res.version} (${cache.kind}): ` +
            `${res.keys} series, ${mb} MB in ${res.seconds.toFixed(2)} s` +
            (res.carried
              ? ` (${res.carried} carried their kept days over from version ${res.previous})`
              : ''),
        );
        if (res.previous !== null) {
          ctx.out(`version ${res.previous} stays readable for ${o.grace ?? config.serve.graceSeconds} s`);
        }
      },
    );
}
