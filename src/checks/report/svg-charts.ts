import { formatDay, toCivil } from '../../core/days.js';

/** Inline SVG charts for the report: pure functions from arrays to markup, no DOM, no network. */

export function esc(s: string): string {
  return s.replace(
    /[&<>"']/g,
    (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' })[c]!,
  );
}

export interface Band {
  readonly from: number;
  readonly to: number;
  readonly className: string;
  readonly title: string;
}

export interface Marker {
  readonly day: number;
  readonly value: number;
  readonly className: string;
  readonly title: string;
}

export interface LineSpec {
  /** values[i] belongs to day firstDay + i; NaN breaks the line. */
  readonly values: ArrayLike<number>;
  readonly className: string;
  /** Draw as steps (prices hold for a week) instead of straight segments. */
  readonly step?: boolean;
}

export interface ChartSpec {
  readonly width: number;
  readonly height: number;
  readonly firstDay: number;
  readonly days: number;
  readonly lines: readonly LineSpec[];
  readonly bands?: readonly Band[];
  readonly markers?: readonly Marker[];
  readonly yLabel?: string;
  /** Print day labels on the x axis (the price panel under a units chart shares its axis and leaves them out). */
  readonly xLabels?: boolean;
  readonly id?: string;
  readonly ariaLabel: string;
}

const MONTHS = ['Jan', 'Feb', 'Mar', 'Apr', 'May', 'Jun', 'Jul', 'Aug', 'Sep', 'Oct', 'Nov', 'Dec'];

/** Round tick values covering [0, max] (1, 2 or 5 times a power of ten). */
export function niceTicks(min: number, max: number, count = 4): number[] {
  if (!(max > min)) return [min];
  const raw = (max - min) / count;
  const mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => s >= raw) ?? 10 * mag;
  const ticks: number[] = [];
  for (let v = Math.ceil(min / step) * step; v <= max + step * 1e-9; v += step)
    ticks.push(Number(v.toPrecision(12)));
  return ticks;
}

/** Day ticks on month boundaries, thinned to every 1, 2, 3, 6 or 12 months to fit. */
export function dayTicks(
  firstDay: number,
  days: number,
  maxTicks: number,
): Array<{ day: number; label: string }> {
  const months: Array<{ day: number; y: number; m: number }> = [];
  const start = toCivil(firstDay);
  let y = start.y;
  let m = start.m;
  for (;;) {
    const d = Date.UTC(y, m - 1, 1) / 86_400_000;
    if (d >= firstDay + days) break;
    if (d >= firstDay) months.push({ day: d, y, m });
    m++;
    if (m > 12) {
      m = 1;
      y++;
    }
  }
  if (months.length === 0) return [{ day: firstDay, label: formatDay(firstDay) }];
  const every = [1, 2, 3, 6, 12].find((k) => months.length / k <= maxTicks) ?? 12;
  return months
    .filter((t) => (t.m - 1) % every === 0)
    .map((t) => ({ day: t.day, label: t.m === 1 || every === 12 ? `${t.y}` : `${MONTHS[t.m - 1]} ${t.y}` }));
}

const fmt = (v: number) => (Math.abs(v) >= 1000 ? `${+(v / 1000).toPrecision(3)}k` : `${+v.toPrecision(3)}`);

/** A line chart over days with shaded bands, point markers, gridlines and labelled axes. */
export function lineChart(c: ChartSpec): string {
  const m = { left: 52, right: 12, top: 10, bottom: c.xLabels === false ? 6 : 24 };
  const w = c.width - m.left - m.right;
  const h = c.height - m.top - m.bottom;
  let lo = 0;
  let hi = 0;
  for (const l of c.lines) {
    for (let i = 0; i < l.values.length; i++) {
      const v = l.values[i] as number;
      if (Number.isNaN(v)) continue;
      if (v > hi) hi = v;
      if (v < lo) lo = v;
    }
  }
  for (const mk of c.markers ?? []) {
    if (mk.value > hi) hi = mk.value;
    if (mk.value < lo) lo = mk.value;
  }
  if (hi === lo) hi = lo + 1;
  const yt = niceTicks(lo, hi, c.height > 120 ? 4 : 2);
  const top = Math.max(hi, yt[yt.length - 1]!);
  const bottom = Math.min(lo, yt[0]!);
  const x = (day: number) => m.left + ((day - c.firstDay + 0.5) / Math.max(1, c.days)) * w;
  const y = (v: number) => m.top + h - ((v - bottom) / (top - bottom || 1)) * h;
  const parts: string[] = [];
  parts.push(
    `<svg class="chart" ${c.id ? `id="${esc(c.id)}" ` : ''}viewBox="0 0 ${c.width} ${c.height}" width="${c.width}" height="${c.height}" role="img" aria-label="${esc(c.ariaLabel)}" data-first-day="${formatDay(c.firstDay)}" data-days="${c.days}">`,
  );
  for (const b of c.bands ?? []) {
    const a = x(b.from) - (0.5 / c.days) * w;
    const z = x(b.to) + (0.5 / c.days) * w;
    // A band is at least 3 px wide, centred on its days, so a single flagged week stays visible.
    const bw = Math.max(3, z - a);
    const bx = (a + z) / 2 - bw / 2;
    parts.push(
      `<rect class="band ${esc(b.className)}" x="${bx.toFixed(1)}" y="${m.top}" width="${bw.toFixed(1)}" height="${h}"><title>${esc(b.title)}</title></rect>`,
    );
  }
  for (const t of yt) {
    parts.push(
      `<line class="grid" x1="${m.left}" x2="${m.left + w}" y1="${y(t).toFixed(1)}" y2="${y(t).toFixed(1)}"/>`,
    );
    parts.push(
      `<text class="tick" x="${m.left - 6}" y="${(y(t) + 4).toFixed(1)}" text-anchor="end">${fmt(t)}</text>`,
    );
  }
  if (c.yLabel) {
    parts.push(
      `<text class="axis-label" transform="translate(12 ${m.top + h / 2}) rotate(-90)" text-anchor="middle">${esc(c.yLabel)}</text>`,
    );
  }
  parts.push(`<line class="axis" x1="${m.left}" x2="${m.left + w}" y1="${m.top + h}" y2="${m.top + h}"/>`);
  for (const t of dayTicks(c.firstDay, c.days, Math.max(2, Math.floor(w / 70)))) {
    const tx = x(t.day).toFixed(1);
    parts.push(`<line class="tickmark" x1="${tx}" x2="${tx}" y1="${m.top + h}" y2="${m.top + h + 4}"/>`);
    if (c.xLabels !== false)
      parts.push(
        `<text class="tick" x="${tx}" y="${m.top + h + 16}" text-anchor="middle">${esc(t.label)}</text>`,
      );
  }
  for (const l of c.lines) {
    const segs: string[] = [];
    let cur: string[] = [];
    for (let i = 0; i < l.values.length; i++) {
      const v = l.values[i] as number;
      if (Number.isNaN(v)) {
        if (cur.length) segs.push(cur.join(' '));
        cur = [];
        continue;
      }
      const px = x(c.firstDay + i).toFixed(1);
      const py = y(v).toFixed(1);
      if (l.step && cur.length) cur.push(`${px},${cur[cur.length - 1]!.split(',')[1]}`);
      cur.push(`${px},${py}`);
    }
    if (cur.length) segs.push(cur.join(' '));
    for (const s of segs) parts.push(`<polyline class="line ${esc(l.className)}" points="${s}"/>`);
  }
  for (const mk of c.markers ?? []) {
    parts.push(
      `<circle class="marker ${esc(mk.className)}" cx="${x(mk.day).toFixed(1)}" cy="${y(mk.value).toFixed(1)}" r="4"><title>${esc(mk.title)}</title></circle>`,
    );
  }
  parts.push(
    `<rect class="hover-target" x="${m.left}" y="${m.top}" width="${w}" height="${h}" data-left="${m.left}" data-width="${w}"/>`,
  );
  parts.push('</svg>');
  return parts.join('');
}
