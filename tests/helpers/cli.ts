import { main } from '../../src/cli/main.js';

/** Runs the CLI in this process, capturing what it prints (argv without 'node larder'). */
export async function runCli(args: readonly string[]): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const so = process.stdout.write.bind(process.stdout);
  const se = process.stderr.write.bind(process.stderr);
  process.stdout.write = ((c: string | Uint8Array) => {
    out += String(c);
    return true;
  }) as typeof process.stdout.write;
  process.stderr.write = ((c: string | Uint8Array) => {
    err += String(c);
    return true;
  }) as typeof process.stderr.write;
  try {
    const code = await main(['node', 'larder', ...args]);
    return { code, out, err };
  } finally {
    process.stdout.write = so;
    process.stderr.write = se;
  }
}
