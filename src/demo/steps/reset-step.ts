import { quoteIdent } from '../../db/database.js';
import { UsageError } from '../../db/errors.js';
import { migrate } from '../../db/migrate.js';
import type { DemoStep } from '../demo.js';

/** The comment that marks a schema as the demo's own, so the demo never drops anything else. */
export const DEMO_SCHEMA_MARK = 'larder demo chain (dropped and rebuilt by every `larder demo`)';

/**
 * Drops the demo schema and migrates it afresh so every demo run starts the same. A schema that
 * exists, holds tables and lacks the demo's mark is refused: it is someone's data.
 */
export const resetStep: DemoStep = {
  name: 'reset schema',
  async run(ctx) {
    const { db } = ctx;
    const schema = quoteIdent(db.schema);
    const found = await db.query<{ mark: string | null; tables: number }>(
      `SELECT obj_description(n.oid, 'pg_namespace') AS mark,
              (SELECT count(*)::int FROM pg_class c WHERE c.relnamespace = n.oid AND c.relkind IN ('r', 'p')) AS tables
         FROM pg_namespace n WHERE n.nspname = $1`,
      [db.schema],
    );
    const row = found.rows[0];
    if (row && row.tables > 0 && row.mark !== DEMO_SCHEMA_MARK) {
      throw new UsageError(
        `schema ${db.schema} holds tables the demo did not make; the demo drops its schema at every run, ` +
          'so give it another one (--schema NAME, or database.schema in the demo config)',
      );
    }
    await db.exec(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    const applied = await migrate(db);
    await db.query(`COMMENT ON SCHEMA ${schema} IS '${DEMO_SCHEMA_MARK.replaceAll("'", "''")}'`);
    ctx.out(`  schema ${db.schema} (${db.kind}): dropped and migrated (${applied.length} migrations)`);
  },
};
