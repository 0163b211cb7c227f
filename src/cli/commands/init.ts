import type { Command } from 'commander';
import { migrate } from '../../db/migrate.js';
import type { CliContext } from '../context.js';

export function register(program: Command, ctx: CliContext): void {
  program
    .command('init')
    .description('create the schema and apply pending migrations (every command does this when needed)')
    .action(async () => {
      const db = await ctx.db();
      const applied = await migrate(db); // already applied by ctx.db(); reports the state
      const total = (await db.query<{ n: number }>('SELECT count(*)::int AS n FROM migrations')).rows[0]?.n;
      ctx.out(
        `schema ${db.schema} (${db.kind}): ${total} migrations applied${applied.length ? '' : ', none pending'}`,
      );
    });
}
