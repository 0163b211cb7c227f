import { existsSync } from 'node:fs';
import { join } from 'node:path';
import type { DemoStep } from '../demo.js';
import { readFaultsFile } from '../faults-file.js';
import { generateChain } from '../generate-chain.js';

/** Generates the demo chain into the data folder unless a valid one is already there. */
export const generateStep: DemoStep = {
  name: 'generate',
  async run(ctx) {
    const faultsPath = join(ctx.dataDir, 'faults.json');
    if (existsSync(faultsPath)) {
      const ok = await readFaultsFile(faultsPath).then(
        () => true,
        (err: Error) => {
          ctx.out(`  ${err.message}; generating again`);
          return false;
        },
      );
      if (ok) {
        ctx.out(`  using the chain already in ${ctx.dataDir} (delete the folder to generate it again)`);
        return;
      }
    }
    const r = await generateChain({ dir: ctx.dataDir });
    const g = r.faults.generator;
    ctx.out(
      `  ${g.stores} stores x ${g.items} items x ${g.days} days (${g.first_day} .. ${g.last_day}), seed ${g.seed}`,
    );
    ctx.out(
      `  ${r.salesLines.toLocaleString('en')} sales lines in ${r.seconds.toFixed(2)} s (${fmtRate(r.rowsPerSecond)})`,
    );
    ctx.out(`  written to ${ctx.dataDir}`);
  },
};

export function fmtRate(rowsPerSecond: number): string {
  return `${(rowsPerSecond / 1e6).toFixed(2)}M rows/s`;
}
