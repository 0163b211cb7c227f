import { describe, expect, test } from 'vitest';
import { CHECK_NAMES } from '../../src/checks/registry.js';
import { parseConfig } from '../../src/config/config.js';
import { ConfigError } from '../../src/db/errors.js';

const errorOf = (checks: unknown) => {
  try {
    parseConfig({ checks }, 'larder.config.json');
  } catch (err) {
    expect(err).toBeInstanceOf(ConfigError);
    return (err as Error).message;
  }
  throw new Error('expected a ConfigError');
};

describe('the checks section of the config', () => {
  test('defaults for every check when absent', () => {
    const c = parseConfig({}, 'defaults');
    expect(Object.keys(c.checks).sort()).toEqual([...CHECK_NAMES].sort());
    expect(c.checks['price-spikes']).toMatchObject({
      enabled: true,
      threshold: 3.5,
      historyWeeks: 13,
      ratio: 3,
    });
    expect(c.checks['stockout-zeros']).toMatchObject({ alpha: 1e-6, lookback: 56, minHistory: 14 });
    expect(c.checks.freshness).toMatchObject({ expectedCutoff: 'today', lagDays: 1 });
  });

  test('overrides keep the other defaults', () => {
    const c = parseConfig(
      { checks: { 'volume-drop': { minShare: 0.4 }, 'units-sanity': { enabled: false } } },
      'x',
    );
    expect(c.checks['volume-drop']).toMatchObject({ minShare: 0.4, weeks: 4, enabled: true });
    expect(c.checks['units-sanity']).toMatchObject({ enabled: false, spikeThreshold: 10 });
  });

  test('a bad threshold names its key', () => {
    expect(errorOf({ 'price-spikes': { threshold: -1 } })).toContain(
      'checks.price-spikes.threshold: expected a number > 0',
    );
    expect(errorOf({ 'price-spikes': { threshold: 'high' } })).toContain(
      'checks.price-spikes.threshold: expected a number > 0',
    );
    expect(errorOf({ 'stockout-zeros': { alpha: 2 } })).toContain(
      'checks.stockout-zeros.alpha: expected a number between 0 and 1 (exclusive)',
    );
    expect(errorOf({ freshness: { lagDays: 1.5 } })).toContain(
      'checks.freshness.lagDays: expected an integer >= 0',
    );
    expect(errorOf({ freshness: { expectedCutoff: '2024-02-30' } })).toContain(
      "checks.freshness.expectedCutoff: expected 'today' or a day YYYY-MM-DD",
    );
  });

  test('severity: one level, or one per code of the check', () => {
    const c = parseConfig(
      {
        checks: {
          'units-sanity': { severity: { 'negative-units': 'warn' } },
          freshness: { severity: 'info' },
        },
      },
      'x',
    );
    expect(c.checks['units-sanity']!.severity).toEqual({ 'negative-units': 'warn' });
    expect(errorOf({ 'units-sanity': { severity: 'fatal' } })).toMatch(
      /checks\.units-sanity\.severity: expected 'block', 'warn', 'info' or an object/,
    );
    expect(errorOf({ 'units-sanity': { severity: { stockout: 'warn' } } })).toContain(
      'checks.units-sanity.severity',
    );
  });

  test('unknown checks and unknown keys are refused', () => {
    expect(errorOf({ 'price-spike': {} })).toContain(
      "checks: unknown check 'price-spike' (known: duplicate-keys,",
    );
    expect(errorOf({ 'price-spikes': { treshold: 3 } })).toMatch(/checks\.price-spikes: .*treshold/);
  });
});
