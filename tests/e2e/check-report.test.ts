import { existsSync, mkdirSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { pathToFileURL } from 'node:url';
import { type BrowserContext, chromium } from 'playwright-core';
import { afterAll, beforeAll, expect, test } from 'vitest';
import { CHECK_NAMES } from '../../src/checks/registry.js';
import { writeReport } from '../../src/checks/report/write-report.js';
import { runChecks } from '../../src/checks/run-checks.js';
import { useTestDb } from '../helpers/db.js';
import {
  addCalendar,
  addItems,
  addPrices,
  addSeries,
  addStores,
  clearTables,
  poissonDays,
} from '../integration/checks/fixture.js';

/** The little of the DOM the page callbacks touch (the project compiles without the DOM lib). */
interface DomNode {
  getAttribute(name: string): string | null;
  readonly textContent: string | null;
}

const CHROMIUM = '/usr/bin/chromium';
const OUT = resolve('test-output');
const t = useTestDb(import.meta.url);
let context: BrowserContext;
let profile: string;
let reportFile: string;

beforeAll(async () => {
  if (!existsSync(CHROMIUM)) {
    throw new Error(
      `${CHROMIUM} is missing: install Debian's chromium (apt-get install -y chromium), as .ci/run does`,
    );
  }
  const { db, config } = t();
  await clearTables(db);
  // A small chain with one fault of each kind the charts show.
  const items = Array.from({ length: 12 }, (_, i) => `I${String(i + 1).padStart(2, '0')}`);
  await addItems(
    db,
    items.map((i) => [i, 'D1', 'C1'] as [string, string, string]),
  );
  await addStores(db, [
    ['S1', 'R1'],
    ['S2', 'R1'],
  ]);
  await addCalendar(db, '2024-01-01', '2024-09-30');
  let seed = 1;
  for (const store of ['S1', 'S2']) {
    for (const item of items) {
      const u: Array<number | null> = poissonDays(240, 1 + (seed % 5), seed);
      if (seed === 3) for (let d = 120; d < 140; d++) u[d] = 0; // a stock-out
      if (seed === 5) u[60] = -2; // a return
      if (seed === 7) for (let d = 30; d < 34; d++) u[d] = null; // missing days
      if (seed === 9) u[200] = 60; // a spike
      if (seed % 4 !== 0) u[180] = null; // a partial load: three series in four lack 2024-07-04
      await addSeries(db, item, store, '2024-01-06', u);
      const weeks = Array.from({ length: 35 }, (_, w) =>
        seed === 4 && w === 20 ? 29.9 : w % 9 === 4 ? 2.49 : 2.99,
      );
      await addPrices(db, item, store, '2024-01-06', weeks);
      seed++;
    }
  }
  const result = await runChecks(db, config, { cutoff: '2024-08-31' });
  mkdirSync(OUT, { recursive: true });
  reportFile = await writeReport(db, result.runId, join(OUT, 'check-report.html'));
  profile = mkdtempSync(join(tmpdir(), 'larder-chromium-'));
  context = await chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM,
    headless: true,
    args: [
      '--no-sandbox',
      '--disable-gpu',
      '--disable-quic',
      '--no-first-run',
      '--disable-background-networking',
      '--disable-component-update',
      '--disable-sync',
    ],
    viewport: { width: 1300, height: 900 },
  });
});

afterAll(async () => {
  await context?.close();
  if (profile) rmSync(profile, { recursive: true, force: true });
});

test('the report opens from disk with no console errors and no network', async () => {
  const page = await context.newPage();
  const problems: string[] = [];
  const requests: string[] = [];
  page.on('console', (m) => {
    if (m.type() === 'error' || m.type() === 'warning') problems.push(`${m.type()}: ${m.text()}`);
  });
  page.on('pageerror', (e) => problems.push(`pageerror: ${e.message}`));
  page.on('request', (r) => {
    if (!r.url().startsWith('file:')) requests.push(r.url());
  });
  await page.goto(pathToFileURL(reportFile).href);
  await page.waitForLoadState('load');

  // Every check is listed in the summary table.
  const listed = await page.$$eval('#check-summary tr.check-row', (rows) =>
    rows.map((r) => r.getAttribute('data-check')),
  );
  expect(listed).toEqual([...CHECK_NAMES]);

  // The chain chart: a line through every day and the volume drop marked.
  const chain = await page.$eval('#chain-volume', (svg) => ({
    points: Array.from(svg.querySelectorAll('polyline.l-units') as ArrayLike<DomNode>).reduce(
      (n: number, p: DomNode) => n + (p.getAttribute('points') ?? '').split(' ').length,
      0,
    ),
    markers: svg.querySelectorAll('circle.marker').length,
    ticks: Array.from(svg.querySelectorAll('text.tick') as ArrayLike<DomNode>).map(
      (x: DomNode) => x.textContent,
    ),
  }));
  expect(chain.points).toBeGreaterThan(200);
  expect(chain.markers).toBeGreaterThanOrEqual(1);
  expect(chain.ticks).toContain('Apr 2024'); // dates on the axis

  // Series cards: units with shaded flagged days, the price line beneath.
  const cards = await page.$$eval('.series-card', (els) =>
    els.map((el) => ({
      lines: el.querySelectorAll('polyline').length,
      bands: el.querySelectorAll('rect.band').length,
      price: el.querySelectorAll('polyline.l-price').length,
    })),
  );
  expect(cards.length).toBeGreaterThanOrEqual(4); // the stock-out, the return, the gap, the price spike
  expect(cards.length).toBeLessThanOrEqual(20);
  expect(cards.every((c) => c.lines >= 2 && c.price >= 1)).toBe(true);
  expect(cards.some((c) => c.bands > 0)).toBe(true);
  expect(await page.locator('.legend').first().textContent()).toContain('7-day mean');

  // The findings table filters, and hovering a chart reads out a day.
  const total = await page.locator('#findings tbody tr').count();
  await page.selectOption('#f-check', 'units-sanity');
  const shown = await page.locator('#findings tbody tr:not([hidden])').count();
  expect(shown).toBeGreaterThan(0);
  expect(shown).toBeLessThan(total);
  await page.hover('#chain-volume .hover-target', { position: { x: 300, y: 100 } });
  expect(await page.locator('#tooltip').isVisible()).toBe(true);
  expect(await page.locator('#tooltip').textContent()).toMatch(/^2024-\d\d-\d\d .*units: /);
  await page.selectOption('#f-check', '');

  await page.screenshot({ path: join(OUT, 'check-report.png'), fullPage: true });
  expect(problems).toEqual([]);
  expect(requests).toEqual([]);
  await page.close();
});
