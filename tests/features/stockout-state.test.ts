import fc from 'fast-check';
import { expect, test } from 'vitest';
import { DEFAULT_STOCKOUT_PARAMS, type StockoutParams } from '../../src/checks/stockout-rule.js';
import { NEVER } from '../../src/features/family.js';
import { stockoutMask } from '../../src/features/stockout-mask.js';
import { resumeStockoutMask, stockoutStateOf } from '../../src/features/stockout-state.js';

// The incremental refresh carries the stock-out rule's state from one cutoff to the next and
// reads only the newest days: its mask must be the whole-history mask (stockoutMask, which runs
// the rule itself) on every day it reads, and its new state the one taken at the new cutoff.
const series = fc
  .array(
    fc.oneof(
      // a selling stretch: positive days with a few zeros and missing days
      fc.array(
        fc.oneof(
          { weight: 6, arbitrary: fc.integer({ min: 1, max: 9 }) },
          fc.constant(0),
          fc.constant(Number.NaN),
        ),
        {
          minLength: 5,
          maxLength: 60,
        },
      ),
      // a zero run, from short to far past any k*
      fc.integer({ min: 1, max: 40 }).map((k) => new Array<number>(k).fill(0)),
    ),
    { minLength: 2, maxLength: 14 },
  )
  .map((parts) => Float64Array.from(parts.flat()));

const PARAMS: StockoutParams[] = [
  DEFAULT_STOCKOUT_PARAMS,
  { alpha: 0.01, lookback: 12, minHistory: 4 },
  { alpha: 0.2, lookback: 6, minHistory: 2 },
];

test('a resumed stock-out mask equals the whole-history mask on the days read, and so does its state', () => {
  const seen = { maskedTail: 0, openAtP: 0, resolved: 0 };
  fc.assert(
    fc.property(
      series,
      fc.nat(),
      fc.integer({ min: 1, max: 9 }),
      fc.integer({ min: 0, max: 30 }),
      fc.constantFrom(...PARAMS),
      (units, at, step, extra, params) => {
        if (units.length < 3) return;
        const P = at % (units.length - 1);
        const C = Math.min(units.length - 1, P + step);
        const reach = params.lookback + extra;
        const keepP = P + 1 - reach;
        const atP = stockoutStateOf(0, units, stockoutMask(0, units, P, params), P, keepP, params);
        const base = Math.max(0, keepP);
        const tail = units.slice(base, C + 1);
        const r = resumeStockoutMask(atP, base, tail, C, C + 1 - reach, params);
        const whole = stockoutMask(0, units, C, params);
        if (r.mask) seen.maskedTail++;
        if (atP.openStart !== null && Number.isFinite(atP.openKStar)) seen.openAtP++;
        if (atP.openStart !== null && r.state.openStart !== atP.openStart) seen.resolved++;
        for (let d = base; d <= C; d++) {
          const want = whole?.maskFrom[d] ?? NEVER;
          const got = r.mask?.maskFrom[d - base] ?? NEVER;
          if (want !== got) throw new Error(`day ${d}: mask ${got}, whole history ${want} (P ${P}, C ${C})`);
        }
        const atC = stockoutStateOf(0, units, whole, C, C + 1 - reach, params);
        expect(r.state).toEqual(atC);
      },
    ),
    { numRuns: 3000 },
  );
  // The cases that matter did occur: masked days read, runs open at P, open runs that closed.
  expect(seen.maskedTail).toBeGreaterThan(100);
  expect(seen.openAtP).toBeGreaterThan(50);
  expect(seen.resolved).toBeGreaterThan(50);
});
