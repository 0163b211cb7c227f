import { expect, test } from 'vitest';
import { buildSnapshot } from '../../../src/build/build-snapshot.js';
import { resolveFeatureSet } from '../../../src/features/feature-set.js';
import { useTestDb } from '../../helpers/db.js';
import { insertChain } from './chain-fixture.js';
import { compareCells, snapshotCells } from './compare-cells.js';
import { duckWithChain, ep, referenceFeatures } from './duckdb-reference.js';

const families = {
  lags: { days: [7, 8, 30] },
  windows: [
    { size: 7, shift: 7 },
    { size: 28, shift: 9, stats: ['mean', 'std', 'min', 'max', 'zero_share', 'ewm'], minDays: 20 },
    { size: 3, shift: 10, stats: ['ewm', 'mean'], alpha: 0.3 },
  ],
  calendar: { eventKinds: ['sporting', 'national'] },
  prices: {},
  encodings: [
    {
      groups: [
        'region',
        'store',
        'category',
        'department',
        'item',
        'store_category',
        'store_department',
        'item_region',
      ],
      window: 28,
      m: 5,
    },
    { groups: ['item'], window: 7, shift: 14, m: 0 },
  ],
  hierarchy: [
    {
      levels: ['store', 'store_category', 'store_department', 'item', 'item_region'],
      size: 14,
      stats: ['mean', 'std', 'min', 'max', 'zero_share'],
    },
    {
      levels: ['total', 'region', 'category', 'department'],
      size: 7,
      shift: 8,
      stats: ['mean', 'std'],
      minDays: 7,
    },
  ],
};

const t = useTestDb(import.meta.url, {
  sets: [
    { name: 'ref_shift', horizon: 7, training: { days: 90 }, families },
    {
      name: 'ref_origin',
      horizon: 5,
      mode: 'origin',
      originEvery: 3,
      pricesKnownAhead: true,
      training: { days: 40 },
      families: { ...families, calendar: { eventKinds: ['cultural'] } },
    },
  ],
});

test.each(['ref_shift', 'ref_origin'])(
  'every cell of %s matches DuckDB computing the same features',
  async (name) => {
    const { db, config } = t();
    if (name === 'ref_shift') await insertChain(db, { stores: 3, items: 7, start: '2023-01-01', days: 240 });
    const cutoff = '2023-07-20';
    const info = await buildSnapshot(db, config, { set: name, cutoff });
    const set = resolveFeatureSet(config, name);
    const got = await snapshotCells(db, info.tableName);
    const con = await duckWithChain(db);
    const keys = [...got.values()].map((r) => ({
      series_id: r.series_id!,
      day: r.kday!,
      origin: r.korigin ?? null,
    }));
    const want = await referenceFeatures(con, set, ep(cutoff), keys);
    const { compared, mismatches } = compareCells(got, want, set.featureNames);
    expect(mismatches.slice(0, 20)).toEqual([]);
    expect(compared).toBe(got.size * set.featureNames.length);
    // The reference is not vacuous: most cells hold values.
    let nulls = 0;
    for (const r of got.values()) for (const c of set.featureNames) if (r[c] === null) nulls++;
    expect(nulls / compared).toBeLessThan(0.2);
  },
);
