import type { Command } from 'commander';
import { addWaiver, listWaivers, revokeWaiver } from '../../checks/waivers.js';
import { UsageError } from '../../db/errors.js';
import type { CliContext } from '../context.js';

interface WaiveOptions {
  check?: string;
  code?: string;
  item?: string;
  store?: string;
  from?: string;
  to?: string;
  reason?: string;
  until?: string;
  list: boolean;
  revoke?: string;
}

/** `larder waive`: acknowledges known findings so they stop blocking (they still show, marked). */
export function register(program: Command, ctx: CliContext): void {
  program
    .command('waive')
    .description(
      'acknowledge known findings of a check so they no longer block; they still show, marked as waived',
    )
    .option('--check <name>', 'the check whose findings are waived')
    .option('--code <code>', 'only findings with this code (default: every code of the check)')
    .option('--item <id>', 'only findings for this item')
    .option('--store <id>', 'only findings for this store')
    .option('--from <day>', 'only findings on or after this day (YYYY-MM-DD)')
    .option('--to <day>', 'only findings on or before this day (YYYY-MM-DD)')
    .option('--reason <text>', 'why the findings are acceptable (required)')
    .option('--until <day>', 'the waiver stops applying after this day (default: no expiry)')
    .option('--list', 'list every waiver instead of adding one', false)
    .option('--revoke <id>', 'revoke a waiver by its id')
    .action(async (o: WaiveOptions) => {
      const db = await ctx.db();
      if (o.list) {
        const all = await listWaivers(db);
        if (all.length === 0) ctx.out('no waivers');
        for (const w of all) {
          const scope = [
            w.code && `code ${w.code}`,
            w.itemId && `item ${w.itemId}`,
            w.storeId && `store ${w.storeId}`,
            (w.fromDay || w.toDay) && `days ${w.fromDay ?? '...'}..${w.toDay ?? '...'}`,
          ].filter(Boolean);
          const state = w.revokedAt ? ' (revoked)' : w.until ? ` (until ${w.until})` : '';
          ctx.out(
            `#${w.waiverId} ${w.check}${scope.length ? ` [${scope.join(', ')}]` : ''}${state}: ${w.reason}`,
          );
        }
        return;
      }
      if (o.revoke !== undefined) {
        const id = Number(o.revoke);
        if (!Number.isInteger(id) || id < 1)
          throw new UsageError(`--revoke: expected a waiver id, got '${o.revoke}'`);
        await revokeWaiver(db, id);
        ctx.out(`waiver #${id} revoked`);
        return;
      }
      if (!o.check) throw new UsageError('--check <name> is required');
      if (o.reason === undefined) throw new UsageError('--reason <text> is required');
      const w = await addWaiver(db, {
        check: o.check,
        reason: o.reason,
        ...(o.code !== undefined && { code: o.code }),
        ...(o.item !== undefined && { itemId: o.item }),
        ...(o.store !== undefined && { storeId: o.store }),
        ...(o.from !== undefined && { fromDay: o.from }),
        ...(o.to !== undefined && { toDay: o.to }),
        ...(o.until !== undefined && { until: o.until }),
      });
      ctx.out(`waiver #${w.waiverId} added for ${w.check}${w.until ? ` until ${w.until}` : ''}`);
    });
}
