/** The report's inline stylesheet and script (no external fonts, files or requests). */

export const REPORT_CSS = `
:root { --ink:#1d2430; --muted:#5f6b7a; --line:#e3e7ee; --bg:#f6f7f9; --card:#fff;
  --block:#c62828; --warn:#b26a00; --info:#1565c0; --ok:#2e7d32; --accent:#24577a; }
* { box-sizing:border-box; }
body { margin:0; background:var(--bg); color:var(--ink);
  font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif; }
code { font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,"Liberation Mono",monospace; font-size:.92em; }
header.top { display:flex; justify-content:space-between; align-items:flex-end; gap:24px; flex-wrap:wrap;
  padding:28px 40px 22px; background:var(--card); border-bottom:1px solid var(--line); }
.eyebrow { text-transform:uppercase; letter-spacing:.08em; font-size:12px; color:var(--muted); font-weight:600; }
h1 { margin:4px 0 6px; font-size:26px; font-weight:650; }
h2 { font-size:19px; margin:0 0 4px; font-weight:650; }
h3 { font-size:14.5px; margin:0; font-weight:600; }
.meta, .lead { color:var(--muted); margin:0 0 14px; }
.meta { margin:0; }
main { padding:8px 40px 40px; max-width:1240px; }
section { background:var(--card); border:1px solid var(--line); border-radius:10px; padding:20px 22px; margin-top:22px; }
.tiles { display:flex; gap:10px; }
.tile { min-width:96px; padding:10px 14px; border-radius:8px; background:var(--bg); border:1px solid var(--line);
  color:var(--muted); font-size:12.5px; text-transform:uppercase; letter-spacing:.05em; }
.tile b { display:block; font-size:24px; color:var(--ink); letter-spacing:0; }
.t-block b { color:var(--block); } .t-warn b { color:var(--warn); } .t-info b { color:var(--info); }
.badge { display:inline-block; padding:2px 9px; border-radius:999px; font-size:12px; font-weight:650;
  text-transform:uppercase; letter-spacing:.04em; vertical-align:middle; white-space:nowrap; }
.badge.big { font-size:13px; padding:3px 11px; }
.st-passed { background:#e6f4ea; color:var(--ok); } .st-warned { background:#fff4e0; color:var(--warn); }
.st-blocked { background:#fdecea; color:var(--block); } .st-failed { background:#4a1010; color:#fff; }
.st-running { background:#eceff1; color:var(--muted); }
table { border-collapse:collapse; width:100%; }
th { text-align:left; font-size:12px; text-transform:uppercase; letter-spacing:.05em; color:var(--muted);
  font-weight:600; border-bottom:2px solid var(--line); padding:8px 10px; }
td { border-bottom:1px solid var(--line); padding:9px 10px; vertical-align:top; }
.num { text-align:right; font-variant-numeric:tabular-nums; white-space:nowrap; }
td.num { font-weight:600; }
.zero { color:#b7bec8; font-weight:400 !important; }
.check-name { font-weight:600; font-size:14px; }
.desc { color:var(--muted); font-size:13.5px; }
.codes { margin-top:4px; display:flex; flex-wrap:wrap; gap:5px; }
.code { font-size:11.5px; padding:1px 7px; border-radius:5px; background:var(--bg); border:1px solid var(--line); color:var(--muted); }
.code b { color:var(--ink); }
.code.sev-block { border-color:#f2b8b5; } .code.sev-warn { border-color:#f0d19c; } .code.sev-info { border-color:#b9d2f0; }
.sev-block { color:var(--block); } .sev-warn { color:var(--warn); } .sev-info { color:var(--info); }
.sev { font-weight:650; font-size:12px; text-transform:uppercase; }
.error { color:var(--block); font-size:13px; margin-top:4px; }
.muted { color:var(--muted); } .small { font-size:12px; } .nowrap { white-space:nowrap; }
.waived { font-size:11px; background:#eceff1; color:var(--muted); border-radius:4px; padding:0 5px; }
tr[data-waived="true"] td { opacity:.62; }
.legend { display:flex; flex-wrap:wrap; gap:6px 18px; font-size:13px; color:var(--muted); margin:4px 0 10px; }
.legend span { display:inline-flex; align-items:center; gap:6px; }
.sw { display:inline-block; width:18px; height:3px; border-radius:2px; }
.sw-units { background:#3a6ea5; } .sw-mean { background:#e07b39; } .sw-price { background:#2f8f6b; }
.sw-band { display:inline-block; width:14px; height:12px; border-radius:2px; }
.dot { display:inline-block; width:10px; height:10px; border-radius:50%; }
.chart-wrap { overflow-x:auto; }
svg.chart { display:block; max-width:100%; height:auto; font-size:11px; }
svg .grid { stroke:#edf0f4; } svg .axis { stroke:#9aa4b1; } svg .tickmark { stroke:#9aa4b1; }
svg .tick { fill:var(--muted); font-size:11px; } svg .axis-label { fill:var(--muted); font-size:11px; }
svg .line { fill:none; stroke-width:1.3; stroke-linejoin:round; }
svg .l-units { stroke:#3a6ea5; } svg .l-mean { stroke:#e07b39; stroke-width:1.8; } svg .l-price { stroke:#2f8f6b; stroke-width:1.6; }
svg .hover-target { fill:transparent; }
svg .guide { stroke:#1d2430; stroke-dasharray:3 3; stroke-width:1; }
.b-stockout { fill:#f7b267; background:#f7b267; opacity:.55; } .b-open { fill:#ffd166; background:#ffd166; opacity:.6; }
.b-gap { fill:#9aa4b1; background:#9aa4b1; opacity:.35; } .b-negative { fill:#e53935; background:#e53935; opacity:.5; }
.b-spike { fill:#8e5bd6; background:#8e5bd6; opacity:.45; } .b-price { fill:#d81b60; background:#d81b60; opacity:.45; }
.b-noprice { fill:#c5a3e8; background:#c5a3e8; opacity:.45; } .b-prelaunch { fill:#dfe4ea; background:#dfe4ea; opacity:.8; }
.b-dup { fill:#6d4c41; background:#6d4c41; opacity:.4; } .b-calendar { fill:#e53935; background:#e53935; opacity:.25; }
circle.marker { stroke:#fff; stroke-width:1.5; }
.m-block { fill:var(--block); background:var(--block); } .m-warn { fill:var(--warn); background:var(--warn); }
.m-info { fill:var(--info); background:var(--info); } .m-waived { fill:#9aa4b1; background:#9aa4b1; }
.cards { display:grid; grid-template-columns:repeat(auto-fill, minmax(540px, 1fr)); gap:16px; }
.series-card { border:1px solid var(--line); border-radius:8px; padding:12px 12px 6px; }
.series-card header { display:flex; justify-content:space-between; gap:10px; flex-wrap:wrap; align-items:baseline; }
.series-card .codes { margin-top:0; }
.worst { font-size:13px; color:var(--muted); margin:4px 0 6px; }
.filters { display:flex; gap:16px; align-items:center; flex-wrap:wrap; margin:6px 0 10px; font-size:13.5px; }
.filters select, .filters input { font:inherit; padding:4px 8px; border:1px solid var(--line); border-radius:6px; background:#fff; }
.findings td { font-size:13.5px; }
.findings td code { white-space:nowrap; }
.table-scroll { max-height:640px; overflow:auto; border:1px solid var(--line); border-radius:8px; }
.table-scroll thead th { position:sticky; top:0; background:var(--card); z-index:1; }
footer { color:var(--muted); font-size:12.5px; padding:0 40px 30px; }
.tooltip { position:fixed; pointer-events:none; background:#1d2430; color:#fff; font-size:12px; padding:6px 9px;
  border-radius:6px; box-shadow:0 4px 14px rgba(0,0,0,.18); white-space:nowrap; z-index:10; }
@media (max-width:700px) { header.top, main, footer { padding-left:16px; padding-right:16px; } .cards { grid-template-columns:1fr; } }
`;

/** Findings-table filters and chart hover read-outs; plain DOM, no dependencies. */
export const REPORT_JS = `
(function () {
  'use strict';
  var data = JSON.parse(document.getElementById('chart-data').textContent || '{}');
  var iso = function (d) { return new Date(d * 86400000).toISOString().slice(0, 10); };
  var fmt = function (v) { return v === null || v === undefined ? 'no row' : (Math.round(v * 100) / 100).toLocaleString('en-US'); };
  var tip = document.getElementById('tooltip');
  document.querySelectorAll('svg.chart').forEach(function (svg) {
    var d = data[svg.id];
    var target = svg.querySelector('.hover-target');
    if (!d || !target) return;
    var left = Number(target.getAttribute('data-left'));
    var width = Number(target.getAttribute('data-width'));
    var days = Number(svg.getAttribute('data-days'));
    var guide = document.createElementNS('http://www.w3.org/2000/svg', 'line');
    guide.setAttribute('class', 'guide');
    guide.setAttribute('y1', target.getAttribute('y'));
    guide.setAttribute('y2', String(Number(target.getAttribute('y')) + Number(target.getAttribute('height'))));
    guide.style.display = 'none';
    svg.appendChild(guide);
    target.addEventListener('mousemove', function (ev) {
      var box = svg.getBoundingClientRect();
      var scale = box.width / svg.viewBox.baseVal.width;
      var x = (ev.clientX - box.left) / scale;
      var i = Math.max(0, Math.min(days - 1, Math.floor(((x - left) / width) * days)));
      var gx = left + ((i + 0.5) / days) * width;
      guide.setAttribute('x1', String(gx));
      guide.setAttribute('x2', String(gx));
      guide.style.display = '';
      var lines = [iso(d.first + i)];
      for (var k = 0; k < d.names.length; k++) lines.push(d.names[k] + ': ' + fmt(d.values[k][i]));
      tip.textContent = lines.join('  ·  ');
      tip.hidden = false;
      tip.style.left = ev.clientX + 14 + 'px';
      tip.style.top = ev.clientY + 14 + 'px';
    });
    target.addEventListener('mouseleave', function () { tip.hidden = true; guide.style.display = 'none'; });
  });
  var check = document.getElementById('f-check');
  var sev = document.getElementById('f-sev');
  var text = document.getElementById('f-text');
  var count = document.getElementById('f-count');
  var rows = Array.prototype.slice.call(document.querySelectorAll('#findings tbody tr'));
  function apply() {
    var c = check.value, s = sev.value, t = text.value.trim().toLowerCase(), shown = 0;
    rows.forEach(function (r) {
      var ok = (!c || r.getAttribute('data-check') === c) && (!s || r.getAttribute('data-severity') === s) &&
        (!t || r.textContent.toLowerCase().indexOf(t) >= 0);
      r.hidden = !ok;
      if (ok) shown++;
    });
    count.textContent = shown + ' of ' + rows.length + ' shown';
  }
  [check, sev, text].forEach(function (el) { if (el) el.addEventListener('input', apply); });
  document.querySelectorAll('.check-row').forEach(function (r) {
    r.style.cursor = 'pointer';
    r.title = 'show this check in the findings table';
    r.addEventListener('click', function () {
      check.value = r.getAttribute('data-check');
      apply();
      document.getElementById('findings').scrollIntoView({ behavior: 'smooth' });
    });
  });
  apply();
})();
`;
