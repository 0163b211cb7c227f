import { SqlState, sqlState } from '../../db/errors.js';
import { LarderError } from '../../db/errors.js';
import { openCache } from '../../publish/open-cache.js';
import { publishSnapshot } from '../../publish/publish-snapshot.js';
import { createReader } from '../../serve/reader.js';
import type { DemoStep } from '../demo.js';

/**
 * Publishes the newest snapshot the demo built (to the in-process cache when there is no
 * REDIS_URL, to Redis otherwise) and prints a few reads through the TypeScript reader.
 */
export const publishStep: DemoStep = {
  name: 'publish and read',
  async run(ctx) {
    const { db, config } = ctx;
    let newest: { set_name: string; cutoff: string } | undefined;
    try {
      newest = (
        await db.query<{ set_name: string; cutoff: string }>(
          'SELECT set_name, cutoff::text AS cutoff FROM snapshots ORDER BY built_at DESC, snapshot_id DESC LIMIT 1',
        )
      ).rows[0];
    } catch (err) {
      if (sqlState(err) !== SqlState.undefinedTable) throw err;
      ctx.out('  no snapshot catalogue: the demo has no build step yet, nothing to publish');
      return;
    }
    if (!newest) {
      ctx.out('  the snapshot catalogue is empty: no build ran before this step, nothing to publish');
      return;
    }
    const cache = openCache(config);
    try {
      const res = await publishSnapshot(db, cache, config, { set: newest.set_name, cutoff: newest.cutoff });
      ctx.out(
        `  published ${res.set} (cutoff ${res.cutoff}) as version ${res.version} to the ${cache.kind} cache: ` +
          `${res.keys} series, ${(res.bytes / 1e6).toFixed(2)} MB in ${res.seconds.toFixed(2)} s`,
      );
      const reader = await createReader({ config, cache, db });
      try {
        const first = (await reader.readAll({ set: res.set, batchSize: 100 }).next()).value;
        if (!first) throw new LarderError('DEMO', `set ${res.set} has no series in the cache`);
        const picks = [0, Math.floor(first.items.length / 2), first.items.length - 1].map((i) => ({
          set: res.set,
          item: first.items[i]!,
          store: first.stores[i]!,
          day: first.firstDay,
        }));
        const t0 = performance.now();
        const reads = await reader.getMany(picks);
        const ms = performance.now() - t0;
        ctx.out(
          `  ${reads.length} reads for ${first.firstDay} in ${ms.toFixed(1)} ms (${first.columns.length} features each):`,
        );
        for (const r of reads) {
          const shown = Object.entries(r.rows[0]!.features)
            .slice(0, 4)
            .map(([k, v]) => `${k}=${v === null ? 'null' : Number(v.toPrecision(4))}`)
            .join(' ');
          ctx.out(`    ${r.item} @ ${r.store} [${r.source}] ${shown} ...`);
        }
        let series = 0;
        const t1 = performance.now();
        for await (const b of reader.readAll({ set: res.set })) series += b.items.length;
        ctx.out(`  readAll streamed ${series} series in ${(performance.now() - t1).toFixed(0)} ms`);
      } finally {
        await reader.close();
      }
    } finally {
      await cache.close();
    }
  },
};
