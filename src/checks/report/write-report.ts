import { mkdir, rename, writeFile } from 'node:fs/promises';
import { dirname, resolve } from 'node:path';
import type { DbSession } from '../../db/database.js';
import { type CollectOptions, collectReport } from './collect-report.js';
import { renderReport } from './render-report.js';

/**
 * Writes the HTML report of a check run to `file` (through a temporary file and a rename, so a
 * reader never sees half a report). Returns the absolute path.
 */
export async function writeReport(
  db: DbSession,
  runId: number,
  file: string,
  opts: CollectOptions = {},
): Promise<string> {
  const path = resolve(file);
  const html = renderReport(await collectReport(db, runId, opts));
  await mkdir(dirname(path), { recursive: true });
  const tmp = `${path}.${process.pid}.tmp`;
  await writeFile(tmp, html, 'utf8');
  await rename(tmp, path);
  return path;
}
