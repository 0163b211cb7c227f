import { basename, join } from 'node:path';
import { LarderError } from '../../db/errors.js';
import type { DemoStep } from '../demo.js';
import { type FaultKind, readFaultsFile, TABLES } from '../faults-file.js';
import { tableTotals } from '../table-totals.js';

const KIND_LABEL: Record<FaultKind, string> = {
  stockout: 'stock-out runs',
  'price-spike': 'price spikes',
  'missing-days': 'series with missing days',
  'duplicate-row': 'duplicate sales lines',
  'negative-units': 'negative unit days (returns)',
  'unknown-item': 'items missing from items.csv',
  'calendar-gap': 'calendar gap',
  'partial-load': 'partial-load day',
};

/**
 * Prints what landed per raw table beside the generator's own totals, the rejected rows by
 * reason, and the faults waiting for the checks. A table that differs from the generator's
 * totals fails the demo: the round trip is the loader's contract.
 */
export const summaryStep: DemoStep = {
  name: 'summary',
  async run(ctx) {
    const faults = await readFaultsFile(join(ctx.dataDir, 'faults.json'));
    const got = await tableTotals(ctx.db);
    const want = faults.totals.tables;
    const bad: string[] = [];
    ctx.out(`  ${'table'.padEnd(14)} ${'rows'.padStart(10)} ${'units'.padStart(10)}   generator`);
    for (const t of TABLES) {
      const g = got[t];
      const w = want[t];
      const gu = 'units' in g ? g.units : 'price_cents' in g ? g.price_cents : undefined;
      const wu = 'units' in w ? w.units : 'price_cents' in w ? w.price_cents : undefined;
      const same = g.rows === w.rows && gu === wu;
      if (!same) bad.push(t);
      const extra = t === 'prices' ? ' (sum in cents)' : '';
      ctx.out(
        `  ${t.padEnd(14)} ${fmt(g.rows).padStart(10)} ${(gu === undefined ? '' : fmt(gu)).padStart(10)}   ` +
          `${same ? 'same' : `expected ${fmt(w.rows)} rows${wu === undefined ? '' : `, ${fmt(wu)}`}`}${extra}`,
      );
    }
    const rejects = await ctx.db.query<{ file: string; n: number }>(
      'SELECT file, count(*)::int AS n FROM rejected_rows GROUP BY file ORDER BY file',
    );
    const total = rejects.rows.reduce((a, r) => a + r.n, 0);
    ctx.out(
      `  rejected rows: ${total ? rejects.rows.map((r) => `${fmt(r.n)} in ${basename(r.file)}`).join(', ') : 'none'}`,
    );
    const first = await ctx.db.query<{ file: string; line: number; reason: string }>(
      'SELECT file, line, reason FROM rejected_rows ORDER BY file, line LIMIT 5',
    );
    for (const r of first.rows) ctx.out(`    ${basename(r.file)} line ${r.line}: ${r.reason}`);
    ctx.out('  faults injected by the generator (faults.json), for the checks to find:');
    for (const [kind, label] of Object.entries(KIND_LABEL)) {
      const n = faults.counts[kind] ?? 0;
      if (n) ctx.out(`    ${String(n).padStart(6)}  ${label}`);
    }
    if (bad.length) {
      throw new LarderError('DEMO', `loaded tables differ from the generator's totals: ${bad.join(', ')}`);
    }
  },
};

const fmt = (n: number) => n.toLocaleString('en');
