import { describe, expect, test } from 'vitest';
import { parseConfig } from '../../src/config/config.js';
import { ConfigError } from '../../src/db/errors.js';
import { parseFeatureSet, resolveFeatureSet } from '../../src/features/feature-set.js';

const base = { name: 'daily', horizon: 7, families: { lags: { days: [7, 14] } } };

function problems(sets: unknown[]): string {
  try {
    parseConfig({ sets }, 'larder.config.ts');
  } catch (err) {
    expect(err).toBeInstanceOf(ConfigError);
    return (err as Error).message;
  }
  throw new Error('the config was accepted');
}

describe('feature set validation names the key', () => {
  test.each([
    [
      'an unknown family',
      { ...base, families: { lags: { days: [7] }, rolling: {} } },
      "sets.0.families.rolling: unknown family 'rolling'",
    ],
    [
      'a window of 0 days',
      { ...base, families: { windows: [{ size: 0, shift: 7 }] } },
      'sets.0.families.windows.0.size: a window of at least 1 day',
    ],
    [
      'a shift below 1',
      { ...base, families: { windows: [{ size: 7, shift: 0 }] } },
      'sets.0.families.windows.0.shift: a shift of at least 1 day',
    ],
    [
      'a lag below 1',
      { ...base, families: { lags: { days: [0] } } },
      'sets.0.families.lags.days.0: a lag of at least 1 day',
    ],
    [
      'duplicate feature names',
      {
        ...base,
        families: {
          windows: [
            { size: 7, shift: 7, stats: ['mean'] },
            { size: 7, shift: 7, stats: ['mean'] },
          ],
        },
      },
      "sets.0.families.windows: duplicate feature name 'mean_7d_s7'",
    ],
    [
      'a set name that is not a safe identifier',
      { ...base, name: 'Daily-Set' },
      'sets.0.name: a name matching ^[a-z][a-z0-9_]{0,62}$',
    ],
    [
      'an event kind that gives no safe column name',
      { ...base, families: { calendar: { eventKinds: ['***'] } } },
      "sets.0.families.calendar.eventKinds.0: event kind '***' does not give a safe column name",
    ],
    [
      'a horizon larger than a lag (shift mode)',
      { ...base, horizon: 14 },
      'sets.0.families.lags.days.0: feature lag_7 uses shift 7 < horizon 14',
    ],
    [
      'a horizon larger than a window shift',
      { ...base, horizon: 28, families: { windows: [{ size: 7, shift: 14, stats: ['mean'] }] } },
      'sets.0.families.windows.0.shift: feature mean_7d_s14 uses shift 14 < horizon 28',
    ],
    [
      'a horizon larger than an encoding shift',
      { ...base, families: { encodings: [{ groups: ['item'], window: 28, shift: 3 }] } },
      'sets.0.families.encodings.0.shift: feature enc_item_28d_s3 uses shift 3 < horizon 7',
    ],
    [
      'a horizon larger than a hierarchy shift',
      { ...base, families: { hierarchy: [{ levels: ['store'], size: 28, shift: 1 }] } },
      'sets.0.families.hierarchy.0.shift: feature store_mean_28d_s1 uses shift 1 < horizon 7',
    ],
    [
      'an unknown window statistic',
      { ...base, families: { windows: [{ size: 7, shift: 7, stats: ['median'] }] } },
      'sets.0.families.windows.0.stats.0',
    ],
    [
      'days_ahead in shift mode',
      { ...base, families: { calendar: { features: ['days_ahead'] } } },
      'sets.0.families.calendar.features.0: days_ahead exists only in origin mode',
    ],
    [
      'both training days and from',
      { ...base, training: { days: 30, from: '2024-01-01' } },
      'sets.0.training: give exactly one of days or from',
    ],
    ['no family', { ...base, families: {} }, 'sets.0.families: a feature set needs at least one family'],
    ['an unknown key', { ...base, horizn: 7 }, 'sets.0: Unrecognized key: "horizn"'],
  ])('%s', (_what, set, message) => {
    expect(problems([set])).toContain(message);
  });

  test('two sets with one name', () => {
    expect(problems([base, base])).toContain("sets.1.name: duplicate feature set name 'daily'");
  });

  test('origin mode allows shifts below the horizon (every boundary is the origin or earlier)', () => {
    const def = parseFeatureSet({
      ...base,
      horizon: 28,
      mode: 'origin',
      families: { lags: { days: [1] }, windows: [{ size: 7, shift: 1 }] },
    });
    expect(def.mode).toBe('origin');
  });
});

describe('definition hash', () => {
  const resolve = (set: unknown) =>
    resolveFeatureSet(parseConfig({ sets: [set] }, 'test'), (set as { name: string }).name);

  test('is stable: key order, defaults spelled out and the name do not change it', () => {
    const a = resolve({
      name: 'a',
      horizon: 7,
      families: { windows: [{ size: 7, shift: 7 }], lags: { days: [7] } },
    });
    const b = resolve({
      families: { lags: { days: [7] }, windows: [{ shift: 7, size: 7 }] },
      mode: 'shift',
      horizon: 7,
      name: 'b',
      stockoutMask: false,
    });
    expect(a.definitionHash).toMatch(/^[0-9a-f]{64}$/);
    expect(b.definitionHash).toBe(a.definitionHash);
  });

  test('changes with any parameter', () => {
    const a = resolve({ name: 'a', horizon: 7, families: { lags: { days: [7] } } });
    const b = resolve({ name: 'a', horizon: 7, families: { lags: { days: [8] } } });
    const c = resolve({ name: 'a', horizon: 7, stockoutMask: true, families: { lags: { days: [7] } } });
    expect(new Set([a.definitionHash, b.definitionHash, c.definitionHash]).size).toBe(3);
  });

  test("stockoutMask: true takes the stock-out check's parameters, and they enter the hash", () => {
    const set = { name: 'm', horizon: 7, stockoutMask: true, families: { lags: { days: [7] } } };
    const plain = resolveFeatureSet(parseConfig({ sets: [set] }, 'test'), 'm');
    const tuned = resolveFeatureSet(
      parseConfig({ sets: [set], checks: { 'stockout-zeros': { alpha: 1e-4 } } }, 'test'),
      'm',
    );
    expect(plain.stockout).toEqual({ alpha: 1e-6, lookback: 56, minHistory: 14 });
    expect(tuned.stockout).toEqual({ alpha: 1e-4, lookback: 56, minHistory: 14 });
    expect(tuned.definition.stockoutMask).toEqual(tuned.stockout);
    expect(tuned.definitionHash).not.toBe(plain.definitionHash);
  });

  test('columns come in family order with their declared boundaries', () => {
    const s = resolve({
      name: 'a',
      horizon: 7,
      families: {
        calendar: { features: ['day_of_week'] },
        lags: { days: [7] },
        encodings: [{ groups: ['item'], window: 28 }],
      },
    });
    expect(s.columns.map((c) => [c.name, c.source, c.shift])).toEqual([
      ['lag_7', 'sales', 7],
      ['day_of_week', 'calendar', 0],
      ['enc_item_28d_s7', 'sales', 7],
    ]);
  });
});
