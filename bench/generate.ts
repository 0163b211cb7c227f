/**
 * `npm run bench -- generate [--scale F] [--keep]`: the demo chain generator on the benchmark
 * chain (10 stores x 3000 items x 1900 days = 57M sales rows at scale 1; the scale multiplies the
 * items). Reports sales rows/s and peak RSS, and as a reference measured in the same run, the time
 * to write a file of the same size with the same writer but no simulation: the ratio says how far
 * the generator is from its write floor.
 */
import { rm, stat } from 'node:fs/promises';
import { join } from 'node:path';
import { ChunkWriter } from '../src/demo/chunk-writer.js';
import { generateChain } from '../src/demo/generate-chain.js';

export async function main(args: string[]): Promise<void> {
  const scaleAt = args.indexOf('--scale');
  const scale = scaleAt >= 0 ? Number(args[scaleAt + 1]) : 1;
  if (!(scale > 0 && scale <= 1)) throw new Error('--scale must be in (0, 1]');
  const items = Math.max(4, Math.round(3000 * scale));
  const dir = join('bench-output', 'generate');
  await rm(dir, { recursive: true, force: true });
  const r = await generateChain({ dir, stores: 10, items, days: 1900, seed: 1 });
  const bytes = (await stat(join(dir, 'sales.csv'))).size;
  const rssGen = process.resourceUsage().maxRSS / 1024;

  // Reference: the same number of bytes of ready-made sales lines through the same writer.
  const line = 'golden-rye-loaf-0012,brackenby,2023-06-14,3\n';
  const perChunk = 1000;
  const block = line.repeat(perChunk);
  const w = new ChunkWriter(join(dir, 'floor.csv'));
  const t0 = performance.now();
  for (let written = 0; written < bytes; written += block.length) {
    w.text(block, perChunk);
    await w.maybeFlush();
  }
  await w.close();
  const floor = (performance.now() - t0) / 1000;

  const mb = bytes / 1e6;
  process.stdout.write(
    [
      `generate: 10 stores x ${items} items x 1900 days, ${r.salesLines.toLocaleString('en')} sales lines, ${mb.toFixed(0)} MB`,
      `  generator   ${r.seconds.toFixed(2)} s  ${(r.rowsPerSecond / 1e6).toFixed(2)}M rows/s  ${(mb / r.seconds).toFixed(0)} MB/s`,
      `  write floor ${floor.toFixed(2)} s  ${(mb / floor).toFixed(0)} MB/s (same bytes, same writer, no simulation)`,
      `  ratio generator / floor: ${(r.seconds / floor).toFixed(2)}`,
      `  peak RSS ${rssGen.toFixed(0)} MB`,
      '',
    ].join('\n'),
  );
  if (!args.includes('--keep')) await rm(dir, { recursive: true, force: true });
}
