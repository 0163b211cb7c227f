import { formatDay, parseDay } from '../core/days.js';
import type { CopyType } from '../db/binary-copy.js';
import { quoteIdent } from '../db/database.js';
import { UsageError } from '../db/errors.js';
import type { SnapshotInfo } from './snapshot-entry.js';

/** Column types of an export, in the names the manifest uses. */
export type ExportType = 'text' | 'date' | 'bool' | 'int4' | 'float8';

export interface ExportColumn {
  readonly name: string;
  readonly type: ExportType;
  readonly nullable: boolean;
  readonly description: string;
  /** The feature family, for feature columns. */
  readonly family?: string;
}

export type RowSelection = 'train' | 'predict' | 'all';

export interface Selection {
  /** Training rows (labelled), prediction rows (C < t <= C + H), or both (default). */
  readonly rows?: RowSelection;
  /** First and last target day to include (inclusive), `YYYY-MM-DD`. */
  readonly from?: string;
  readonly to?: string;
  /** Feature columns to keep, in this order (default: all, in catalogue order). */
  readonly columns?: readonly string[];
}

/** What to read from a snapshot table and how its rows become export columns. */
export interface ExportLayout {
  readonly columns: readonly ExportColumn[];
  /** Binary COPY types of the selected table columns; the first is always series_id. */
  readonly copyTypes: readonly CopyType[];
  readonly hasOrigin: boolean;
  readonly features: readonly string[];
  readonly rows: RowSelection;
  readonly from: string | null;
  readonly to: string | null;
  /** `SELECT ... FROM table WHERE ...` without an ORDER BY. */
  readonly select: string;
}

const ROWS = ['train', 'predict', 'all'] as const;

function dayOption(v: string | undefined, what: string): string | null {
  if (v === undefined) return null;
  const d = parseDay(v);
  if (d === null) throw new UsageError(`${what} '${v}' is not a valid day (YYYY-MM-DD)`);
  return formatDay(d);
}

/** Resolves a selection against a snapshot; unknown feature names are a usage error listing them. */
export function exportLayout(info: SnapshotInfo, sel: Selection = {}): ExportLayout {
  const rows = sel.rows ?? 'all';
  if (!(ROWS as readonly string[]).includes(rows))
    throw new UsageError(`rows must be one of ${ROWS.join(', ')}, got '${rows}'`);
  const from = dayOption(sel.from, 'from');
  const to = dayOption(sel.to, 'to');
  if (from && to && from > to) throw new UsageError(`from ${from} is after to ${to}`);
  const known = new Map(info.features.map((f) => [f.name, f]));
  const wanted = sel.columns ?? info.features.map((f) => f.name);
  const unknown = wanted.filter((c) => !known.has(c));
  if (unknown.length) {
    throw new UsageError(
      `unknown feature column(s) ${unknown.join(', ')} in ${info.set} ${info.cutoff}; available: ${info.features.map((f) => f.name).join(', ')}`,
    );
  }
  const dupes = wanted.filter((c, i) => wanted.indexOf(c) !== i);
  if (dupes.length) throw new UsageError(`column(s) listed twice: ${[...new Set(dupes)].join(', ')}`);
  const hasOrigin = info.mode === 'origin';
  const columns: ExportColumn[] = [
    { name: 'item_id', type: 'text', nullable: false, description: 'item identifier' },
    { name: 'store_id', type: 'text', nullable: false, description: 'store identifier' },
    { name: 'day', type: 'date', nullable: false, description: 'target day t' },
    ...(hasOrigin
      ? [
          {
            name: 'origin',
            type: 'date',
            nullable: false,
            description: 'forecast origin o (t = o + h); sales after o are unseen',
          } as const,
        ]
      : []),
    {
      name: 'is_predict',
      type: 'bool',
      nullable: false,
      description: `true for prediction rows (cutoff ${info.cutoff} < day <= cutoff + ${info.horizon})`,
    },
    {
      name: 'label',
      type: 'int4',
      nullable: true,
      description: 'units sold on day; empty on prediction rows',
    },
    ...wanted.map((name) => {
      const f = known.get(name)!;
      return {
        name,
        type: 'float8' as const,
        nullable: true,
        description: f.description || `${f.family} feature`,
        ...(f.family ? { family: f.family } : {}),
      };
    }),
  ];
  const tableCols = ['series_id', 'day', ...(hasOrigin ? ['origin'] : []), 'is_predict', 'label', ...wanted];
  const copyTypes: CopyType[] = [
    'int4',
    'date',
    ...(hasOrigin ? (['date'] as const) : []),
    'bool',
    'int4',
    ...wanted.map(() => 'float8' as const),
  ];
  const where: string[] = [];
  if (rows === 'train') where.push('NOT is_predict');
  if (rows === 'predict') where.push('is_predict');
  // Days come from formatDay (digits and hyphens), so they are safe as literals.
  if (from) where.push(`day >= DATE '${from}'`);
  if (to) where.push(`day <= DATE '${to}'`);
  const select = `SELECT ${tableCols.map(quoteIdent).join(', ')} FROM ${quoteIdent(info.tableName)}${where.length ? ` WHERE ${where.join(' AND ')}` : ''}`;
  return { columns, copyTypes, hasOrigin, features: wanted, rows, from, to, select };
}
