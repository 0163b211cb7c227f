import { createHash } from 'node:crypto';
import { createReadStream } from 'node:fs';
import { readdir, stat } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import type { Config } from '../config/config.js';
import type { Db } from '../db/database.js';
import { InputError, LarderError } from '../db/errors.js';
import { loadFiles } from '../load/load-files.js';
import { LOAD_TARGETS, type LoadTarget } from '../load/targets.js';
import type { WatchConfig } from './pipeline-config.js';
import type { LoadOutcome } from './pipeline-step.js';
import type { Reporter } from './progress.js';
import { errorCode } from './worker.js';

/** A file in the watched folder and the raw table it feeds. */
export interface WatchedFile {
  readonly path: string;
  readonly name: string;
  readonly target: LoadTarget;
  readonly size: number;
}

const EXTENSIONS = /(\.(csv|tsv|txt))?(\.gz)?$/i;
// Longest names first, so `benefit_days_...` is not read as something shorter.
const BY_LENGTH = [...LOAD_TARGETS].sort((a, b) => b.length - a.length);

/**
 * The raw table a file name points to: an entry of `targets` (a file-name prefix -> table), or
 * a name that starts with the table's name (`sales.csv`, `sales_2024-06-02.csv.gz`,
 * `benefit-days.csv`). Null when nothing matches.
 */
export function targetOf(name: string, targets?: Readonly<Record<string, LoadTarget>>): LoadTarget | null {
  const stem = name.replace(EXTENSIONS, '').toLowerCase();
  if (targets) {
    const prefixes = Object.keys(targets).sort((a, b) => b.length - a.length);
    const hit = prefixes.find((p) => stem.startsWith(p.toLowerCase()));
    if (hit) return targets[hit]!;
  }
  const norm = stem.replaceAll('-', '_');
  for (const t of BY_LENGTH) {
    if (norm === t || (norm.startsWith(t) && /^[^a-z0-9]/.test(norm.slice(t.length)))) return t;
  }
  return null;
}

/**
 * Files of the folder (not its subfolders) in load order: hierarchy and calendar before prices
 * and sales, then by name, so dated files land oldest first. Hidden and in-progress files
 * (`.tmp`, `.part`) are left alone: writers should write under another name and rename.
 */
export async function scanFolder(watch: WatchConfig): Promise<{ files: WatchedFile[]; ignored: string[] }> {
  const dir = resolve(watch.dir);
  let names: string[];
  try {
    names = await readdir(dir);
  } catch (err) {
    throw new InputError(`watched folder ${dir}: ${(err as Error).message}`, { cause: err });
  }
  const files: WatchedFile[] = [];
  const ignored: string[] = [];
  for (const name of names.sort()) {
    if (name.startsWith('.') || /\.(tmp|part)$/i.test(name)) continue;
    const path = join(dir, name);
    const st = await stat(path);
    if (!st.isFile()) continue;
    const target = targetOf(name, watch.targets);
    if (!target) ignored.push(name);
    else files.push({ path, name, target, size: st.size });
  }
  files.sort(
    (a, b) => LOAD_TARGETS.indexOf(a.target) - LOAD_TARGETS.indexOf(b.target) || (a.name < b.name ? -1 : 1),
  );
  return { files, ignored };
}

export async function sha256File(path: string): Promise<string> {
  const h = createHash('sha256');
  for await (const chunk of createReadStream(path)) h.update(chunk as Buffer);
  return h.digest('hex');
}

/**
 * Loads what the watched folder holds that was not loaded before (by path and content hash, so a
 * file replaced under the same name loads again), one file per batch in load order, under an
 * advisory lock so two runners never load the same file twice. A rejected file stops the load
 * with an error naming it; it is tried again on the next run, so the failure stays loud until
 * the file is fixed or removed.
 */
export async function loadWatchedFolder(
  db: Db,
  config: Config,
  reporter: Reporter,
): Promise<LoadOutcome | null> {
  const watch = config.pipeline.watch;
  if (!watch) return null;
  const startedAt = new Date();
  const loaded: { path: string; target: string; rows: number }[] = [];
  const lockKey = `larder.watch:${db.schema}`;
  try {
    return await db.session(async (s) => {
      await s.query('SELECT pg_advisory_lock(hashtextextended($1, 0))', [lockKey]);
      try {
        const { files, ignored } = await scanFolder(watch);
        for (const name of ignored)
          reporter.warn(`watched folder: ${name} matches no raw table; ignored`, { file: name });
        for (const f of files) {
          const sha = await sha256File(f.path);
          const seen = await s.query(
            `SELECT 1 FROM pipeline_files WHERE path = $1 AND sha256 = $2 AND status = 'loaded'`,
            [f.path, sha],
          );
          if (seen.rowCount) continue;
          reporter.info(`loading ${f.name} into ${f.target}`, {
            file: f.path,
            target: f.target,
            bytes: f.size,
          });
          const report = await loadFiles(db, config, {
            files: { [f.target]: f.path },
            mode: watch.mode,
            ...(watch.layout ? { layout: watch.layout } : {}),
          });
          const b = report.batches[0]!;
          await s.query(
            `INSERT INTO pipeline_files (path, sha256, size, target, status, batch_ids, rows, message)
             VALUES ($1, $2, $3, $4, $5, $6, $7, $8)
             ON CONFLICT (path, sha256) DO UPDATE SET status = EXCLUDED.status, batch_ids = EXCLUDED.batch_ids,
               rows = EXCLUDED.rows, message = EXCLUDED.message, loaded_at = now(), run_id = NULL`,
            [
              f.path,
              sha,
              f.size,
              f.target,
              b.status,
              report.batches.map((x) => x.batchId),
              b.rowsStored,
              b.status === 'rejected' ? rejectText(b) : null,
            ],
          );
          if (b.status === 'rejected') {
            throw new InputError(`${f.path}: batch ${b.batchId} rejected, nothing stored: ${rejectText(b)}`);
          }
          loaded.push({ path: f.path, target: f.target, rows: b.rowsStored });
        }
        return outcome(loaded, startedAt);
      } finally {
        await s.query('SELECT pg_advisory_unlock(hashtextextended($1, 0))', [lockKey]).catch(() => {});
      }
    });
  } catch (err) {
    const code = err instanceof LarderError ? err.code : errorCode(err);
    return { ...outcome(loaded, startedAt), error: { code, message: (err as Error).message } };
  }
}

function rejectText(b: {
  rowsRejected: number;
  firstRejects: readonly { line: number; reason: string }[];
}): string {
  const first = b.firstRejects.map((r) => `line ${r.line}: ${r.reason}`).join('; ');
  return `${b.rowsRejected} rejected row(s)${first ? ` (${first})` : ''}`;
}

function outcome(files: LoadOutcome['files'], startedAt: Date): LoadOutcome {
  return { files, rows: files.reduce((n, f) => n + f.rows, 0), startedAt, finishedAt: new Date() };
}
