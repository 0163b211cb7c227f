import { join } from 'node:path';
import { LarderError } from '../../db/errors.js';
import { loadFiles } from '../../load/load-files.js';
import type { DemoStep } from '../demo.js';
import { readFaultsFile } from '../faults-file.js';

const FILE_KEYS = ['items', 'stores', 'sales', 'prices', 'calendar', 'events', 'benefit_days'] as const;

/**
 * Loads the generated raw CSVs in one `loadFiles` call, as `larder load` would. The sales file
 * holds exact duplicate lines on purpose; the demo allows exactly as many rejects as faults.json
 * says it injected, so a loader that rejects more (or a generator that injected more) fails here.
 */
export const loadStep: DemoStep = {
  name: 'load',
  async run(ctx) {
    const faults = await readFaultsFile(join(ctx.dataDir, 'faults.json'));
    const files: Partial<Record<(typeof FILE_KEYS)[number], string>> = {};
    for (const k of FILE_KEYS) {
      const f = faults.files[k];
      if (f) files[k] = join(ctx.dataDir, f);
    }
    const maxRejects = Object.values(faults.totals.rejects).reduce((a, b) => a + b, 0);
    const res = await loadFiles(ctx.db, ctx.config, {
      files,
      layout: faults.generator.layout,
      mode: 'append',
      maxRejects,
    });
    ctx.out(
      `  ${'file'.padEnd(18)} ${'read'.padStart(10)} ${'stored'.padStart(10)} ${'rejected'.padStart(9)}   seconds`,
    );
    for (const b of res.batches) {
      const name = b.file.split(/[\\/]/).pop() ?? b.file;
      ctx.out(
        `  ${name.padEnd(18)} ${fmt(b.rowsRead).padStart(10)} ${fmt(b.rowsStored).padStart(10)} ` +
          `${fmt(b.rowsRejected).padStart(9)}   ${b.seconds.toFixed(2)}${b.status === 'loaded' ? '' : '  REJECTED'}`,
      );
      for (const r of b.firstRejects.slice(0, 3)) {
        ctx.out(
          `      line ${r.line}${r.otherLine ? ` (same key as line ${r.otherLine})` : ''}: ${r.reason}`,
        );
      }
    }
    if (!res.ok) throw new LarderError('DEMO', 'the demo chain did not load; see the batches above');
  },
};

const fmt = (n: number) => n.toLocaleString('en');
