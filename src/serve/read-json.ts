import { floatsOf } from '../publish/layout.js';
import type { FeatureRead, FeatureRow, PackedReadHead } from './read-types.js';

type RowWriter = (features: Record<string, number | null>) => string;

const NAME_RE = /^[a-z][a-z0-9_]{0,62}$/;
const writers = new Map<string, RowWriter>();

/** A finite number as JSON prints it; null, NaN and the infinities as null (JSON has no others). */
const num = (v: number | null) => (v !== null && Number.isFinite(v) ? String(v) : 'null');

/**
 * A compiled writer for one column list: string pieces with the quoted names precomputed. Measured
 * here at about a third of JSON.stringify's time for a 28 x 40 read (the largest cost of an HTTP
 * read); names are checked against the identifier pattern, so no text from a manifest runs as code.
 */
function writerFor(names: readonly string[]): RowWriter {
  const key = names.join(',');
  let w = writers.get(key);
  if (w) return w;
  if (!names.every((n) => NAME_RE.test(n))) {
    w = (features) => JSON.stringify(features);
  } else {
    const body = names.map((n, i) => `'${i ? ',' : '{'}"${n}":' + num(o.${n})`).join(' + ');
    w = new Function('num', `return function (o) { return ${body || "'{'"} + '}'; };`)(num) as RowWriter;
  }
  if (writers.size >= 64) writers.delete(writers.keys().next().value!);
  writers.set(key, w);
  return w;
}

function rowsJson(rows: readonly FeatureRow[]): string {
  if (rows.length === 0) return '[]';
  const write = writerFor(Object.keys(rows[0]!.features));
  let s = '[';
  rows.forEach((r, i) => {
    s += `${i ? ',' : ''}{"day":${JSON.stringify(r.day)},"features":${write(r.features)}}`;
  });
  return `${s}]`;
}

/** The JSON of a read, equal to `JSON.stringify(read)` (same keys, order and numbers). */
export function featureReadJson(r: FeatureRead): string {
  return (
    `{"set":${JSON.stringify(r.set)},"item":${JSON.stringify(r.item)},"store":${JSON.stringify(r.store)},` +
    `"cutoff":${JSON.stringify(r.cutoff)},"version":${num(r.version)},"source":${JSON.stringify(r.source)},` +
    `"rows":${rowsJson(r.rows)}}`
  );
}

type MatrixRowWriter = (m: Float32Array, at: number) => string;
const matrixWriters = new Map<string, MatrixRowWriter>();

/** A compiled writer of one day's features straight from a matrix (no object in between). */
function matrixWriterFor(names: readonly string[]): MatrixRowWriter {
  const key = names.join(',');
  let w = matrixWriters.get(key);
  if (w) return w;
  if (!names.every((n) => NAME_RE.test(n))) {
    w = (m, at) => JSON.stringify(Object.fromEntries(names.map((n, f) => [n, m[at + f]])));
  } else {
    const body = names.map((n, f) => `'${f ? ',' : '{'}"${n}":' + num(m[at + ${f}])`).join(' + ');
    w = new Function('num', `return function (m, at) { return ${body || "'{'"} + '}'; };`)(
      num,
    ) as MatrixRowWriter;
  }
  if (matrixWriters.size >= 64) matrixWriters.delete(matrixWriters.keys().next().value!);
  matrixWriters.set(key, w);
  return w;
}

/**
 * The JSON of a cache read written from the packed `H x F` matrix itself: the same text as
 * `featureReadJson` of the decoded read (NaN as null), without building a row object per day.
 * `h` is the one row asked for, or null for every day.
 */
export function packedReadJson(head: PackedReadHead, packed: Uint8Array, h: number | null): string {
  const F = head.names.length;
  const h0 = h ?? 0;
  const h1 = h === null ? head.days.length : h + 1;
  const m = floatsOf(packed, h0 * F, (h1 - h0) * F);
  const write = matrixWriterFor(head.names);
  let rows = '[';
  for (let r = h0; r < h1; r++) {
    rows += `${r > h0 ? ',' : ''}{"day":${JSON.stringify(head.days[r])},"features":${write(m, (r - h0) * F)}}`;
  }
  return (
    `{"set":${JSON.stringify(head.set)},"item":${JSON.stringify(head.item)},"store":${JSON.stringify(head.store)},` +
    `"cutoff":${JSON.stringify(head.cutoff)},"version":${num(head.version)},"source":"cache",` +
    `"rows":${rows}]}`
  );
}
