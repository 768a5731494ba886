// Charts drawn on canvases: a calibration table's colour strip, the false-colour bars of the
// map layers and profiles along a line or a specimen's edge.

import { labToRgb, css, cividis } from './colour.js';

const INK = '#1d2430';
const MUTED = '#5a6472';
const GRID = '#d5dae1';
const FONT = '12px system-ui, sans-serif';

// Number formatting with a real minus sign.
export function fmt(value, digits = 2) {
  if (!Number.isFinite(value)) return '–';
  const text = value.toFixed(digits);
  // No "−0.0": a value that rounds to zero is shown unsigned.
  return Number(text) === 0 ? text.replace('-', '') : text.replace('-', '−');
}

// Evenly spaced "nice" tick values (1, 2 or 5 × 10^k apart) covering [min, max].
export function ticks(min, max, count = 6) {
  const span = max - min || 1;
  const raw = span / count;
  const power = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 5, 10].map((m) => m * power).find((s) => s >= raw);
  const out = [];
  for (let v = Math.ceil(min / step) * step; v <= max + step * 1e-9; v += step) out.push(Number(v.toFixed(10)));
  return out;
}

// Sizes a canvas's backing store to its CSS box (times the device pixel ratio) and returns a
// context that draws in CSS pixels, with the box's width and height.
function prepare(canvas) {
  const dpr = window.devicePixelRatio || 1;
  const w = canvas.clientWidth || canvas.width;
  const h = canvas.clientHeight || canvas.height;
  canvas.width = Math.round(w * dpr);
  canvas.height = Math.round(h * dpr);
  const ctx = canvas.getContext('2d');
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  ctx.clearRect(0, 0, w, h);
  ctx.font = FONT;
  return { ctx, w, h };
}

function text(ctx, s, x, y, align = 'left', colour = INK) {
  ctx.fillStyle = colour;
  ctx.textAlign = align;
  ctx.textBaseline = 'middle';
  ctx.fillText(s, x, y);
}

// Root-sum-square of an entry's per-channel spread: the size of its colour scatter, ΔE*ab.
const spreadOf = (e) => Math.hypot(e.spread[0], e.spread[1], e.spread[2]);

// A calibration table drawn as a strip of tint colours over fringe order, with the spread of the
// pixels behind each colour plotted underneath. Pointer and arrow keys pick an entry; its values
// are written to `readout`.
export class TableStrip {
  constructor(canvas, readout) {
    this.canvas = canvas;
    this.readout = readout;
    this.entries = [];
    this.index = null;
    this.pad = { left: 56, right: 16 };
    canvas.addEventListener('pointermove', (e) => {
      const rect = canvas.getBoundingClientRect();
      this.pick(this.indexAt(e.clientX - rect.left));
    });
    canvas.addEventListener('keydown', (e) => {
      const steps = { ArrowLeft: -1, ArrowRight: 1, Home: -Infinity, End: Infinity };
      if (!(e.key in steps) || !this.entries.length) return;
      e.preventDefault();
      const jump = steps[e.key] * (e.shiftKey ? 10 : 1);
      this.pick(Math.min(this.entries.length - 1, Math.max(0, (this.index ?? 0) + jump)));
    });
    new ResizeObserver(() => this.draw()).observe(canvas);
  }

  show(table) {
    this.entries = table.entries;
    this.index = null;
    const top = this.entries.length ? this.entries[this.entries.length - 1].order : 0;
    this.canvas.setAttribute(
      'aria-label',
      `Colour strip of ${this.entries.length} table entries from fringe order 0 to ${fmt(top)}, ` +
        'with the colour spread underneath. Use the left and right arrow keys to read entries.',
    );
    this.readout.textContent = 'Point at the strip, or focus it and use the arrow keys, to read an entry.';
    this.draw();
  }

  get maxOrder() {
    return this.entries.length ? this.entries[this.entries.length - 1].order : 1;
  }

  xOf(order, w) {
    return this.pad.left + (order / this.maxOrder) * (w - this.pad.left - this.pad.right);
  }

  indexAt(x) {
    if (!this.entries.length) return null;
    const w = this.canvas.clientWidth;
    const t = (x - this.pad.left) / (w - this.pad.left - this.pad.right);
    const order = Math.min(1, Math.max(0, t)) * this.maxOrder;
    let best = 0;
    this.entries.forEach((e, i) => {
      if (Math.abs(e.order - order) < Math.abs(this.entries[best].order - order)) best = i;
    });
    return best;
  }

  pick(index) {
    if (index === null) return;
    this.index = index;
    const e = this.entries[index];
    const [L, a, b] = e.lab;
    this.readout.textContent =
      `Fringe order ${fmt(e.order, 3)}: L* ${fmt(L, 1)}, a* ${fmt(a, 1)}, b* ${fmt(b, 1)}; ` +
      `spread ${fmt(spreadOf(e), 1)} ΔE*ab` + (e.samples ? ` from ${e.samples} pixels` : '');
    this.draw();
  }

  draw() {
    if (!this.entries.length || !this.canvas.clientWidth) return;
    const { ctx, w } = prepare(this.canvas);
    const strip = { top: 4, bottom: 54 };
    const plot = { top: 62, bottom: 110 };
    const n = this.entries.length;
    // Colour strip: each entry fills the span halfway to its neighbours.
    this.entries.forEach((e, i) => {
      const x0 = this.xOf(i === 0 ? e.order : (this.entries[i - 1].order + e.order) / 2, w);
      const x1 = this.xOf(i === n - 1 ? e.order : (this.entries[i + 1].order + e.order) / 2, w);
      ctx.fillStyle = css(labToRgb(e.lab));
      ctx.fillRect(Math.floor(x0), strip.top, Math.ceil(x1 - x0) + 1, strip.bottom - strip.top);
    });
    ctx.strokeStyle = INK;
    ctx.lineWidth = 1;
    ctx.strokeRect(this.pad.left - 0.5, strip.top - 0.5, w - this.pad.left - this.pad.right + 1, strip.bottom - strip.top + 1);
    text(ctx, 'Tint', this.pad.left - 8, (strip.top + strip.bottom) / 2, 'right', MUTED);

    // Spread plot.
    const spreads = this.entries.map(spreadOf);
    const yTop = Math.max(1, ...spreads);
    const yOf = (v) => plot.bottom - (v / yTop) * (plot.bottom - plot.top);
    ctx.strokeStyle = GRID;
    for (const v of ticks(0, yTop, 2)) {
      ctx.beginPath();
      ctx.moveTo(this.pad.left, Math.round(yOf(v)) + 0.5);
      ctx.lineTo(w - this.pad.right, Math.round(yOf(v)) + 0.5);
      ctx.stroke();
      text(ctx, fmt(v, v < 10 ? 1 : 0), this.pad.left - 8, yOf(v), 'right', MUTED);
    }
    ctx.beginPath();
    this.entries.forEach((e, i) => {
      const x = this.xOf(e.order, w);
      if (i === 0) ctx.moveTo(x, yOf(spreads[i]));
      else ctx.lineTo(x, yOf(spreads[i]));
    });
    ctx.strokeStyle = '#2f5d9e';
    ctx.lineWidth = 1.5;
    ctx.stroke();
    text(ctx, 'Spread ΔE', this.pad.left + 4, plot.top + 2, 'left', MUTED);

    // Order axis.
    ctx.strokeStyle = INK;
    ctx.lineWidth = 1;
    ctx.beginPath();
    ctx.moveTo(this.pad.left, plot.bottom + 0.5);
    ctx.lineTo(w - this.pad.right, plot.bottom + 0.5);
    ctx.stroke();
    for (const v of ticks(0, this.maxOrder, Math.max(2, Math.floor(w / 90)))) {
      const x = Math.round(this.xOf(v, w)) + 0.5;
      ctx.beginPath();
      ctx.moveTo(x, plot.bottom);
      ctx.lineTo(x, plot.bottom + 5);
      ctx.stroke();
      text(ctx, fmt(v, Number.isInteger(v) ? 0 : 1), x, plot.bottom + 14, 'center');
    }
    text(ctx, 'Fringe order', (w + this.pad.left) / 2, plot.bottom + 32, 'center', MUTED);

    if (this.index !== null) {
      const x = Math.round(this.xOf(this.entries[this.index].order, w)) + 0.5;
      ctx.beginPath();
      ctx.moveTo(x, strip.top - 2);
      ctx.lineTo(x, plot.bottom);
      ctx.lineWidth = 3;
      ctx.strokeStyle = '#fff';
      ctx.stroke();
      ctx.lineWidth = 1;
      ctx.strokeStyle = INK;
      ctx.stroke();
    }
  }
}

// A false-colour bar from `bottom` (lower end) to `top` (upper end) in the colours of
// `colourOf(t)`, t in [0, 1], with numbered ticks; `what` names the quantity for screen readers
// ("fringe order", "σ1 − σ2 in MPa").
export function drawColourBar(canvas, top, { bottom = 0, colourOf = cividis, what = 'fringe order' } = {}) {
  const { ctx, h } = prepare(canvas);
  const bar = { left: 4, width: 22, top: 8, bottom: h - 8 };
  const span = bar.bottom - bar.top;
  for (let y = 0; y < span; y += 1) {
    ctx.fillStyle = css(colourOf(1 - y / (span - 1)));
    ctx.fillRect(bar.left, bar.top + y, bar.width, 1);
  }
  ctx.strokeStyle = INK;
  ctx.lineWidth = 1;
  ctx.strokeRect(bar.left - 0.5, bar.top - 0.5, bar.width + 1, span + 1);
  const labels = [];
  for (const v of ticks(bottom, top, Math.min(10, Math.max(2, Math.floor(span / 40))))) {
    const y = Math.round(bar.bottom - ((v - bottom) / (top - bottom)) * span) + 0.5;
    ctx.beginPath();
    ctx.moveTo(bar.left + bar.width, y);
    ctx.lineTo(bar.left + bar.width + 5, y);
    ctx.stroke();
    const label = fmt(v, Number.isInteger(v) ? 0 : 1);
    labels.push(label);
    text(ctx, label, bar.left + bar.width + 8, y);
  }
  const end = (v) => fmt(v, Number.isInteger(v) ? 0 : 1);
  canvas.setAttribute('aria-label', `Colour scale of ${what} from ${end(bottom)} to ${end(top)}, numbered ${labels.join(', ')}.`);
}

// A profile along a path: `samples` = [{distance (px), value, gap, shade}] (value NaN = no
// value; gap: the curve breaks before this sample; shade: a band marks it, e.g. beyond-range
// pixels next to an edge). Options: `yLabel`; `secondary` {perUnit, label} adds a
// right-hand axis (e.g. σ1 − σ2 in MPa per fringe); `xLabel`; `mmPerPx` numbers the distance
// in mm under the pixels; `mark` {distance, value} rings one point (a maximum).
export function drawProfile(canvas, samples, { yLabel = 'Fringe order', secondary = null, xLabel = 'Distance along the line', mmPerPx = null, mark = null } = {}) {
  const { ctx, w, h } = prepare(canvas);
  const pad = { left: 56, right: secondary ? 64 : 16, top: 12, bottom: mmPerPx ? 54 : 40 };
  const valued = samples.filter((s) => Number.isFinite(s.value));
  const length = samples.length ? samples[samples.length - 1].distance : 1;
  const yMax = Math.max(0.5, ...valued.map((s) => s.value)) * 1.05;
  const xOf = (d) => pad.left + (d / (length || 1)) * (w - pad.left - pad.right);
  const yOf = (n) => h - pad.bottom - (n / yMax) * (h - pad.top - pad.bottom);

  ctx.lineWidth = 1;
  for (const v of ticks(0, yMax, 5)) {
    const y = Math.round(yOf(v)) + 0.5;
    ctx.strokeStyle = GRID;
    ctx.beginPath();
    ctx.moveTo(pad.left, y);
    ctx.lineTo(w - pad.right, y);
    ctx.stroke();
    text(ctx, fmt(v, 1), pad.left - 8, y, 'right');
  }
  if (secondary) {
    const sMax = yMax * secondary.perUnit;
    for (const v of ticks(0, sMax, 5)) {
      text(ctx, fmt(v, v < 10 ? 1 : 0), w - pad.right + 8, yOf(v / secondary.perUnit), 'left', MUTED);
    }
    ctx.save();
    ctx.translate(w - 10, (pad.top + h - pad.bottom) / 2);
    ctx.rotate(Math.PI / 2);
    text(ctx, secondary.label, 0, 0, 'center', MUTED);
    ctx.restore();
  }
  for (const v of ticks(0, length, Math.max(2, Math.floor(w / 100)))) {
    const x = Math.round(xOf(v)) + 0.5;
    ctx.strokeStyle = GRID;
    ctx.beginPath();
    ctx.moveTo(x, pad.top);
    ctx.lineTo(x, h - pad.bottom);
    ctx.stroke();
    text(ctx, fmt(v, 0), x, h - pad.bottom + 12, 'center');
    if (mmPerPx) text(ctx, fmt(v * mmPerPx, 1), x, h - pad.bottom + 26, 'center', MUTED);
  }
  const units = mmPerPx ? 'pixels; mm below' : 'pixels';
  text(ctx, `${xLabel} (${units})`, (w + pad.left - pad.right) / 2, h - 10, 'center', MUTED);
  ctx.save();
  ctx.translate(14, (pad.top + h - pad.bottom) / 2);
  ctx.rotate(-Math.PI / 2);
  text(ctx, yLabel, 0, 0, 'center', MUTED);
  ctx.restore();

  ctx.fillStyle = 'rgba(194, 65, 12, 0.18)';
  for (const s of samples) {
    if (s.shade) ctx.fillRect(xOf(s.distance) - 1, pad.top, 2, h - pad.top - pad.bottom);
  }
  ctx.strokeStyle = INK;
  ctx.strokeRect(pad.left + 0.5, pad.top + 0.5, w - pad.left - pad.right, h - pad.top - pad.bottom);
  // The curve, broken where there is no value and at gaps.
  ctx.beginPath();
  let open = false;
  for (const s of samples) {
    if (!Number.isFinite(s.value) || s.gap) open = false;
    if (!Number.isFinite(s.value)) continue;
    if (open) ctx.lineTo(xOf(s.distance), yOf(s.value));
    else ctx.moveTo(xOf(s.distance), yOf(s.value));
    open = true;
  }
  ctx.strokeStyle = '#1f4e96';
  ctx.lineWidth = 2;
  ctx.stroke();
  if (mark) {
    ctx.beginPath();
    ctx.arc(xOf(mark.distance), yOf(mark.value), 5, 0, Math.PI * 2);
    ctx.strokeStyle = '#c2410c';
    ctx.lineWidth = 2;
    ctx.stroke();
  }
}
