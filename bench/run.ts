/**
 * `npm run bench -- <name> [args]`: runs bench/<name>.ts, which exports `main(args)`.
 * Benchmarks measure against a reference taken in the same run and print ratios.
 */
const [name, ...args] = process.argv.slice(2);
if (!name || !/^[a-z][a-z0-9-]*$/.test(name)) {
  process.stderr.write('usage: npm run bench -- <name> [args]   (a file bench/<name>.ts)\n');
  process.exit(2);
}
const mod = (await import(`./${name}.ts`)) as { main?: (args: string[]) => Promise<void> };
if (typeof mod.main !== 'function') {
  process.stderr.write(`bench/${name}.ts exports no main(args)\n`);
  process.exit(2);
}
await mod.main(args);
