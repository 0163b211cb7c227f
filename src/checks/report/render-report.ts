import { formatDay, parseDay } from '../../core/days.js';
import type { Finding } from '../finding.js';
import type { ReportData, ReportSeries } from './collect-report.js';
import { REPORT_CSS, REPORT_JS } from './report-assets.js';
import { type Band, esc, lineChart, type Marker } from './svg-charts.js';

/** How each finding code is shaded on a series chart (class names styled in report-assets.ts). */
const BAND_CLASS: Readonly<Record<string, string>> = {
  stockout: 'b-stockout',
  'open-zero-run': 'b-open',
  'pre-launch': 'b-prelaunch',
  'negative-units': 'b-negative',
  'units-spike': 'b-spike',
  'price-spike': 'b-price',
  'non-positive-price': 'b-price',
  'missing-price': 'b-noprice',
  'duplicate-row': 'b-dup',
  'duplicate-key': 'b-dup',
};

const LEGEND_SERIES: ReadonlyArray<[string, string]> = [
  ['sw-units', 'daily units'],
  ['sw-price', 'weekly price'],
  ['b-stockout', 'stock-out run'],
  ['b-open', 'open zero run'],
  ['b-gap', 'days without a row'],
  ['b-negative', 'negative units'],
  ['b-spike', 'units spike'],
  ['b-price', 'price spike'],
  ['b-noprice', 'sold week without price'],
  ['b-prelaunch', 'before first sale'],
];

const day = (s: string | null) => (s === null ? null : parseDay(s));
const int = (n: number | null) => (n === null ? '' : n.toLocaleString('en-US'));

function badge(status: string): string {
  const word =
    { passed: 'passed', warned: 'warnings', blocked: 'blocked', failed: 'failed' }[status] ?? status;
  return `<span class="badge st-${esc(status)}">${esc(word)}</span>`;
}

function keys(f: Finding): string {
  return [
    f.itemId && `item ${f.itemId}`,
    f.storeId && `store ${f.storeId}`,
    !f.storeId && f.regionId && `region ${f.regionId}`,
  ]
    .filter(Boolean)
    .join(' · ');
}

function span(f: Finding): string {
  if (f.weekStart) return `week of ${f.weekStart}`;
  if (f.firstDay && f.lastDay && f.firstDay !== f.lastDay) return `${f.firstDay} → ${f.lastDay}`;
  return f.firstDay ?? f.lastDay ?? '';
}

function summaryTable(d: ReportData): string {
  const rows = d.checks.map((c) => {
    const codes = c.codes
      .map(
        (k) =>
          `<span class="code sev-${k.severity}" title="${esc(k.meaning)}">${esc(k.code)} <b>${k.count}</b></span>`,
      )
      .join(' ');
    const err = c.error ? `<div class="error">could not run: ${esc(c.error)}</div>` : '';
    return `<tr class="check-row" data-check="${esc(c.check)}">
      <td>${badge(c.status)}</td>
      <td><code class="check-name">${esc(c.check)}</code><div class="desc">${esc(c.description)}</div><div class="codes">${codes}</div>${err}</td>
      <td class="num ${c.blocking ? 'sev-block' : 'zero'}">${c.blocking}</td>
      <td class="num ${c.warnings ? 'sev-warn' : 'zero'}">${c.warnings}</td>
      <td class="num ${c.infos ? 'sev-info' : 'zero'}">${c.infos}</td>
      <td class="num ${c.waived ? '' : 'zero'}">${c.waived}</td>
      <td class="num muted">${(c.elapsedMs / 1000).toFixed(2)} s</td>
    </tr>`;
  });
  return `<table class="summary" id="check-summary">
    <thead><tr><th>status</th><th>check</th><th class="num">block</th><th class="num">warn</th><th class="num">info</th><th class="num">waived</th><th class="num">time</th></tr></thead>
    <tbody>${rows.join('')}</tbody></table>`;
}

function chainChart(d: ReportData, data: Record<string, unknown>): string {
  if (!d.daily)
    return '<p class="muted">No check read the sales table in this run, so there is no daily volume to show.</p>';
  const { firstDay, units } = d.daily;
  const mean = new Float64Array(units.length).fill(Number.NaN);
  let s = 0;
  let n = 0;
  for (let i = 0; i < units.length; i++) {
    const v = units[i]!;
    if (!Number.isNaN(v)) {
      s += v;
      n++;
    }
    if (i >= 7 && !Number.isNaN(units[i - 7]!)) {
      s -= units[i - 7]!;
      n--;
    }
    if (i >= 6 && n > 0) mean[i] = s / n;
  }
  const markers: Marker[] = [];
  const bands: Band[] = [];
  for (const f of d.chainFindings) {
    const a = day(f.firstDay);
    const b = day(f.lastDay) ?? a;
    if (a === null || b === null) continue;
    if (f.code === 'volume-drop') {
      const v = units[a - firstDay];
      markers.push({
        day: a,
        value: v === undefined || Number.isNaN(v) ? 0 : v,
        className: f.waivedBy !== null ? 'm-waived' : `m-${f.severity}`,
        title: `${f.firstDay}: ${f.message}`,
      });
    } else {
      bands.push({ from: a, to: b, className: 'b-calendar', title: `${span(f)}: ${f.message}` });
    }
  }
  data['chain-volume'] = {
    first: firstDay,
    names: ['units', '7-day mean'],
    values: [Array.from(units), Array.from(mean)],
  };
  const chart = lineChart({
    id: 'chain-volume',
    width: 1100,
    height: 280,
    firstDay,
    days: units.length,
    lines: [
      { values: units, className: 'l-units' },
      { values: mean, className: 'l-mean' },
    ],
    bands,
    markers,
    yLabel: 'units per day',
    ariaLabel: 'chain-wide daily units with flagged days',
  });
  const legend = `<div class="legend">
    <span><i class="sw sw-units"></i>daily units</span><span><i class="sw sw-mean"></i>7-day mean</span>
    <span><i class="dot m-block"></i>volume drop (blocks)</span><span><i class="dot m-waived"></i>waived</span>
    <span><i class="sw-band b-calendar"></i>calendar gap or day most series lack</span></div>`;
  return `${legend}<div class="chart-wrap">${chart}</div>`;
}

function seriesCard(s: ReportSeries, idx: number, data: Record<string, unknown>): string {
  const n = s.units.length;
  const bands: Band[] = [];
  // Gaps come from the data itself, so every missing day is shaded, not only the longest gap.
  for (let i = 0; i < n; i++) {
    if (!Number.isNaN(s.units[i]!)) continue;
    const a = i;
    while (i < n && Number.isNaN(s.units[i]!)) i++;
    bands.push({
      from: s.firstDay + a,
      to: s.firstDay + i - 1,
      className: 'b-gap',
      title: `no row ${formatDay(s.firstDay + a)}..${formatDay(s.firstDay + i - 1)}`,
    });
  }
  for (const f of s.findings) {
    const cls = BAND_CLASS[f.code];
    const a = day(f.weekStart ?? f.firstDay);
    const b = f.weekStart ? (a === null ? null : a + 6) : (day(f.lastDay) ?? a);
    if (!cls || a === null || b === null) continue;
    bands.push({
      from: Math.max(a, s.firstDay),
      to: Math.min(b, s.firstDay + n - 1),
      className: cls,
      title: `${span(f)}: ${f.message}`,
    });
  }
  const price = new Float64Array(n).fill(Number.NaN);
  s.priceWeeks.forEach((w, k) => {
    for (let i = Math.max(0, w - s.firstDay); i < Math.min(n, w - s.firstDay + 7); i++)
      price[i] = s.prices[k]!;
  });
  const idU = `series-${idx}-units`;
  const idP = `series-${idx}-price`;
  data[idU] = { first: s.firstDay, names: ['units'], values: [Array.from(s.units)] };
  data[idP] = { first: s.firstDay, names: ['price'], values: [Array.from(price)] };
  const priceBands = bands.filter((b) => b.className === 'b-price' || b.className === 'b-noprice');
  const unitsChart = lineChart({
    id: idU,
    width: 540,
    height: 150,
    firstDay: s.firstDay,
    days: n,
    lines: [{ values: s.units, className: 'l-units' }],
    bands: bands.filter((b) => b.className !== 'b-price'),
    yLabel: 'units',
    // The price panel right beneath carries the day labels of the shared axis.
    xLabels: false,
    ariaLabel: `daily units of item ${s.itemId} in store ${s.storeId}`,
  });
  const priceChart = lineChart({
    id: idP,
    width: 540,
    height: 86,
    firstDay: s.firstDay,
    days: n,
    lines: [{ values: price, className: 'l-price', step: true }],
    bands: priceBands,
    yLabel: 'price',
    xLabels: true,
    ariaLabel: `weekly price of item ${s.itemId} in store ${s.storeId}`,
  });
  const counts = new Map<string, { n: number; sev: string }>();
  for (const f of s.findings) {
    const c = counts.get(f.code) ?? { n: 0, sev: f.severity };
    c.n++;
    counts.set(f.code, c);
  }
  const chips = [...counts]
    .map(([code, c]) => `<span class="code sev-${esc(c.sev)}">${esc(code)} <b>${c.n}</b></span>`)
    .join(' ');
  const worst = s.findings.find((f) => f.severity !== 'info') ?? s.findings[0];
  return `<article class="series-card" data-series="${s.seriesId}">
    <header><h3>item <code>${esc(s.itemId)}</code> · store <code>${esc(s.storeId)}</code></h3><div class="codes">${chips}</div></header>
    ${worst ? `<p class="worst">${esc(worst.message)}</p>` : ''}
    <div class="chart-wrap">${unitsChart}</div><div class="chart-wrap">${priceChart}</div></article>`;
}

function findingsTable(d: ReportData): string {
  const rows = d.findings.map(
    (
      f,
    ) => `<tr data-check="${esc(f.check)}" data-severity="${f.severity}" data-waived="${f.waivedBy !== null}">
      <td><span class="sev sev-${f.severity}">${f.severity}</span>${f.waivedBy !== null ? ` <span class="waived" title="waiver #${f.waivedBy}">waived</span>` : ''}</td>
      <td><code>${esc(f.check)}</code><div class="muted small">${esc(f.code)}</div></td>
      <td>${esc(keys(f))}</td><td class="nowrap">${esc(span(f))}</td><td>${esc(f.message)}</td></tr>`,
  );
  const options = d.checks.map((c) => `<option value="${esc(c.check)}">${esc(c.check)}</option>`).join('');
  const more =
    d.totalFindings > d.findings.length
      ? `<p class="muted">Showing the ${d.findings.length} worst of ${int(d.totalFindings)} findings; <code>larder check --json</code> lists them all.</p>`
      : '';
  return `<div class="filters">
      <label>check <select id="f-check"><option value="">all</option>${options}</select></label>
      <label>severity <select id="f-sev"><option value="">all</option><option>block</option><option>warn</option><option>info</option></select></label>
      <label>search <input id="f-text" type="search" placeholder="item, store, day, text"></label>
      <span id="f-count" class="muted"></span></div>
    ${more}
    <div class="table-scroll"><table class="findings" id="findings"><thead><tr><th>severity</th><th>check</th><th>keys</th><th>days</th><th>finding</th></tr></thead>
    <tbody>${rows.join('')}</tbody></table></div>`;
}

/** The whole report as one self-contained HTML document (inline CSS, JS and SVG). */
export function renderReport(d: ReportData, generatedAt = new Date()): string {
  const data: Record<string, unknown> = {};
  const r = d.run;
  const chain = chainChart(d, data);
  const cards = d.series.map((s, i) => seriesCard(s, i, data)).join('');
  const legend = LEGEND_SERIES.map(([cls, label]) =>
    cls.startsWith('sw')
      ? `<span><i class="sw ${cls}"></i>${label}</span>`
      : `<span><i class="sw-band ${cls}"></i>${label}</span>`,
  ).join('');
  const verdict = r.status === 'passed' ? 'nothing blocks' : r.status === 'blocked' ? 'blocked' : r.status;
  // JSON inside <script> must not close the element early.
  const json = JSON.stringify(data, (_k, v) =>
    typeof v === 'number' && !Number.isFinite(v) ? null : v,
  ).replace(/</g, '\\u003c');
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">
<title>Larder check run ${r.runId}: ${esc(verdict)}</title>
<style>${REPORT_CSS}</style></head>
<body>
<header class="top">
  <div><div class="eyebrow">Larder · data-quality report</div><h1>Check run ${r.runId} <span class="badge big st-${esc(r.status)}">${esc(verdict)}</span></h1>
  <p class="meta">${r.cutoff ? `cutoff <b>${esc(r.cutoff)}</b> · ` : ''}sales ${esc(r.firstDay ?? '–')} → ${esc(r.lastDay ?? '–')} · ${int(r.salesRows)} rows · ${int(r.seriesSeen)} series${r.scheduled ? ' · scheduled run' : ''} · started ${esc(r.startedAt.replace('T', ' ').slice(0, 19))} UTC</p></div>
  <div class="tiles">
    <div class="tile t-block"><b>${int(r.blocking)}</b>blocking</div>
    <div class="tile t-warn"><b>${int(r.warnings)}</b>warnings</div>
    <div class="tile t-info"><b>${int(r.infos)}</b>info</div>
    <div class="tile t-waived"><b>${int(r.waived)}</b>waived</div>
  </div>
</header>
<main>
<section><h2>Checks</h2><p class="lead">Every check of the run with its findings by severity. A blocking finding stops a build until it is fixed or waived (<code>larder waive</code>).</p>${summaryTable(d)}</section>
<section><h2>Chain-wide daily units</h2><p class="lead">Units summed over every series, per day; flagged days are marked.</p>${chain}</section>
<section><h2>Worst flagged series</h2><p class="lead">The ${d.series.length} series with the most serious findings: daily units with flagged days shaded, the weekly price beneath.</p>
  <div class="legend">${legend}</div><div class="cards">${cards || '<p class="muted">No series-level finding above info.</p>'}</div></section>
<section><h2>Findings</h2>${findingsTable(d)}</section>
</main>
<footer>Generated by Larder on ${esc(generatedAt.toISOString().replace('T', ' ').slice(0, 19))} UTC from check run ${r.runId}. Self-contained: opens offline.</footer>
<div id="tooltip" class="tooltip" hidden></div>
<script type="application/json" id="chart-data">${json}</script>
<script>${REPORT_JS}</script>
</body></html>
`;
}
