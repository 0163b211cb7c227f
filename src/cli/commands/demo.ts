import { existsSync } from 'node:fs';
import { resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { Command } from 'commander';
import { loadConfig } from '../../config/config.js';
import { SAFE_IDENT_PATTERN } from '../../db/database.js';
import { UsageError } from '../../db/errors.js';
import { openDatabase } from '../../db/open.js';
import { runDemo } from '../../demo/demo.js';
import { DEMO_DEFAULTS, generateChain } from '../../demo/generate-chain.js';
import { fmtRate } from '../../demo/steps/generate-step.js';
import type { CliContext } from '../context.js';

/** The demo's own config, used unless `--config` names another: the demo never reads a project's. */
export const DEMO_CONFIG = fileURLToPath(new URL('../../../examples/larder.config.ts', import.meta.url));

const int = (name: string, min: number) => (v: string) => {
  const n = Number(v);
  if (!/^\d+$/.test(v) || !Number.isSafeInteger(n) || n < min) {
    throw new UsageError(`--${name}: expected a whole number >= ${min}, got '${v}'`);
  }
  return n;
};

interface DemoFlags {
  generate?: string;
  stores: number;
  items: number;
  days: number;
  seed: number;
  startDay: string;
  layout: 'long' | 'wide';
  data: string;
  out: string;
  schema?: string;
}

export function register(program: Command, ctx: CliContext): void {
  program
    .command('demo')
    .description(
      'run the demo: generate the invented chain into --data (if absent), reset the demo schema, load, summarise; ' +
        'with --generate DIR only generate',
    )
    .option('--generate <dir>', 'only generate the demo chain into DIR (raw CSVs, faults.json, corrections/)')
    .option('--stores <n>', 'stores in the generated chain', int('stores', 1), DEMO_DEFAULTS.stores)
    .option('--items <n>', 'items in the generated chain', int('items', 4), DEMO_DEFAULTS.items)
    .option('--days <n>', 'days of sales history', int('days', 112), DEMO_DEFAULTS.days)
    .option(
      '--seed <n>',
      'seed: the same seed gives byte-identical files',
      int('seed', 0),
      DEMO_DEFAULTS.seed,
    )
    .option('--start-day <day>', 'first day of the history (ISO 8601)', DEMO_DEFAULTS.startDay)
    .option('--layout <layout>', 'sales file layout: long or wide', DEMO_DEFAULTS.layout)
    .option('--data <dir>', 'folder of the demo chain the demo loads', 'demo-data')
    .option('--out <dir>', 'folder for the demo outputs (reports, exports)', 'demo-output')
    .option(
      '--schema <name>',
      "schema the demo drops and rebuilds, also its cache key prefix (default: the demo config's, larder_demo)",
    )
    .action(async (flags: DemoFlags, cmd: Command) => {
      if (flags.layout !== 'long' && flags.layout !== 'wide') {
        throw new UsageError(`--layout: expected long or wide, got '${flags.layout}'`);
      }
      if (flags.generate !== undefined) {
        const r = await generateChain(
          {
            dir: resolve(flags.generate),
            stores: flags.stores,
            items: flags.items,
            days: flags.days,
            seed: flags.seed,
            startDay: flags.startDay,
            layout: flags.layout,
          },
          (done, total, lines) => {
            if (process.stderr.isTTY)
              process.stderr.write(`\r  store ${done}/${total}, ${lines.toLocaleString('en')} lines`);
          },
        );
        if (process.stderr.isTTY) process.stderr.write('\n');
        const g = r.faults.generator;
        ctx.out(`demo chain written to ${r.dir}`);
        ctx.out(
          `  ${g.stores} stores x ${g.items} items x ${g.days} days, ${g.first_day} .. ${g.last_day}, seed ${g.seed}`,
        );
        ctx.out(
          `  ${r.salesLines.toLocaleString('en')} sales lines in ${r.seconds.toFixed(2)} s (${fmtRate(r.rowsPerSecond)})`,
        );
        ctx.out(
          `  faults: ${Object.entries(r.faults.counts)
            .map(([k, n]) => `${n} ${k}`)
            .join(', ')}`,
        );
        return;
      }
      const sizeFlags = ['stores', 'items', 'days', 'seed', 'startDay', 'layout'];
      const given = sizeFlags.filter((k) => cmd.getOptionValueSource(k) === 'cli');
      if (given.length) {
        throw new UsageError(
          `--${given.map((k) => k.replace(/[A-Z]/g, (c) => `-${c.toLowerCase()}`)).join(', --')} ` +
            'only apply with --generate: run `larder demo --generate DIR ...`, then `larder demo --data DIR`',
        );
      }
      if (flags.schema !== undefined && !SAFE_IDENT_PATTERN.test(flags.schema)) {
        throw new UsageError(
          `--schema: '${flags.schema}' is not a schema name (expected ^[a-z][a-z0-9_]{0,62}$)`,
        );
      }
      const explicit = program.opts<{ config?: string }>().config;
      if (!explicit && !existsSync(DEMO_CONFIG))
        throw new UsageError(`demo config not found: ${DEMO_CONFIG}`);
      const loaded = await loadConfig({ path: explicit ?? DEMO_CONFIG });
      const schema = flags.schema ?? loaded.database.schema;
      // A demo in a schema of its own also publishes under a cache prefix of its own, so two
      // demos (or a demo and a project) sharing one Redis never read each other's keys.
      const config =
        schema === loaded.database.schema
          ? loaded
          : {
              ...loaded,
              database: { ...loaded.database, schema },
              redis: { ...loaded.redis, prefix: schema.slice(0, 32) },
            };
      const db = await openDatabase(config, { schema, migrate: false });
      ctx.onClose(() => db.close());
      ctx.out(
        `larder demo: ${db.kind === 'embedded' ? `embedded database in ${config.database.embeddedDir}` : 'PostgreSQL server'}, schema ${schema}`,
      );
      await runDemo(config, db, ctx.out, { dataDir: flags.data, outDir: flags.out });
    });
}
