import type { Command } from 'commander';
import { listSnapshots } from '../../build/snapshot-catalogue.js';
import type { CliContext } from '../context.js';

/** `larder snapshots`: the built snapshots from the catalogue, with the table holding each. */
export function register(program: Command, ctx: CliContext): void {
  program
    .command('snapshots')
    .description('list built snapshots from the catalogue: set, cutoff, table, rows, hashes')
    .option('--set <name>', 'only this feature set')
    .option('--json', 'print one JSON object per snapshot', false)
    .action(async (o: { set?: string; json: boolean }) => {
      const db = await ctx.db();
      const list = await listSnapshots(db, o.set);
      if (o.json) {
        for (const s of list) ctx.out(JSON.stringify(s));
        return;
      }
      if (list.length === 0) {
        ctx.out('no snapshots built yet (larder build --set NAME --cutoff DAY)');
        return;
      }
      const rows = list.map((s) => [
        s.set,
        s.cutoff,
        s.tableName,
        String(s.rowCount),
        String(s.trainRows),
        String(s.predictRows),
        String(s.columns.length),
        s.definitionHash.slice(0, 12),
        s.dataFingerprint.slice(0, 12),
        s.builtAt.slice(0, 19).replace('T', ' '),
      ]);
      const head = [
        'set',
        'cutoff',
        'table',
        'rows',
        'train',
        'predict',
        'features',
        'definition',
        'data',
        'built',
      ];
      const widths = head.map((h, i) => Math.max(h.length, ...rows.map((r) => r[i]!.length)));
      const line = (r: string[]) =>
        r
          .map((v, i) => v.padEnd(widths[i]!))
          .join('  ')
          .trimEnd();
      ctx.out(line(head));
      for (const r of rows) ctx.out(line(r));
    });
}
