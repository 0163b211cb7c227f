import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { parseConfig } from '../../src/config/config.js';
import type { Db } from '../../src/db/database.js';
import { openDatabase } from '../../src/db/open.js';
import { scoreForecasts } from '../../src/eval/score-forecasts.js';
import { exportSnapshot } from '../../src/export/export-snapshot.js';
import { openSnapshot } from '../../src/export/open-snapshot.js';
import { useTestDb } from '../helpers/db.js';
import { CUTOFF, seedChain, twoItemChain } from './eval-fixtures.js';
import { makeSnapshot } from './export-fixtures.js';

// The embedded database (PGlite) takes other paths through the reader (one COPY blob, no
// cancel, sorted straight away): its files must be byte-identical to the server's.
const t = useTestDb(import.meta.url);
const dir = mkdtempSync(join(tmpdir(), 'larder-embedded-'));
const SPEC = { set: 'daily', cutoff: '2024-01-31', table: 'snap_daily', series: 9, days: 90, horizon: 14 };
let embedded: Db;
const embeddedConfig = parseConfig(
  { database: { schema: 'larder', embeddedDir: join(dir, 'pgdata') } },
  'test',
);

beforeAll(async () => {
  embedded = await openDatabase(embeddedConfig);
  await makeSnapshot(embedded, SPEC);
  await makeSnapshot(t().db, SPEC);
});
afterAll(async () => {
  await embedded?.close();
  rmSync(dir, { recursive: true, force: true });
});

test('Parquet, CSV and Arrow exports are byte-identical from the embedded database and the server', async () => {
  for (const format of ['parquet', 'csv', 'arrow'] as const) {
    const a = await exportSnapshot(embedded, embeddedConfig, {
      ...SPEC,
      out: join(dir, `e.${format}`),
      format,
    });
    const b = await exportSnapshot(t().db, t().config, { ...SPEC, out: join(dir, `s.${format}`), format });
    expect(a.rowCount).toBe(9 * 104);
    expect(a.sha256, format).toBe(b.sha256);
  }
});

test('openSnapshot and scoring work on the embedded database', async () => {
  let n = 0;
  const opened = await openSnapshot({
    set: 'daily',
    cutoff: SPEC.cutoff,
    db: embedded,
    as: 'rows',
    rows: 'predict',
  });
  for await (const row of opened) {
    expect(row.is_predict).toBe(true);
    n++;
  }
  expect(n).toBe(9 * 14);
  await seedChain(embedded, twoItemChain);
  const r = await scoreForecasts(embedded, embeddedConfig, { cutoff: CUTOFF, horizon: 2, weightDays: 2 });
  // Naive = the REFERENCES.md §5.3 forecasts: levels 1-9 at 0.2852987011, 10-12 at 0.7296910077.
  expect(r.sources[0]!.wrmsse).toBeCloseTo((9 * 0.2852987011 + 3 * 0.7296910077) / 12, 9);
});
