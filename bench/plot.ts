/**
 * A small generic plotter: series of (x, y) points with markers and lines,
 * linear or logarithmic axes with ticks, grid, labels, a title and a legend,
 * drawn into an RGB raster and encoded as PNG by fast-png. Text uses the
 * built-in 5x7 font (font.ts).
 */
import { encode } from 'fast-png';
import { glyph, GLYPH_W } from '../src/picture/font.js';
import { wrap } from '../src/picture/raster.js';

export type Rgb = [number, number, number];
export type Marker = 'square' | 'circle' | 'triangle' | 'diamond' | 'cross' | 'plus';

export interface Series {
  name: string;
  points: [number, number][];
  color: Rgb;
  marker?: Marker;
  dashed?: boolean;
  /** Connect the points in order of x (default), of y, or not at all. */
  connect?: 'x' | 'y' | 'none';
  /** Optional group of each point: lines join only points of the same group. */
  groups?: number[];
}

/** A vertical reference line across the plot (e.g. a lossless method, which has no finite y). */
export interface VLine {
  x: number;
  name: string;
  color: Rgb;
}

export interface Axis {
  label: string;
  log?: boolean;
  /** Fixed limits; taken from the data (padded) when absent. */
  min?: number;
  max?: number;
}

export interface PlotSpec {
  title: string;
  width?: number;
  height?: number;
  x: Axis;
  y: Axis;
  series: Series[];
  vlines?: VLine[];
  /** A line of small text under the x label. */
  note?: string;
}

const WHITE: Rgb = [255, 255, 255];
const BLACK: Rgb = [0, 0, 0];
const GRID: Rgb = [225, 225, 225];

/** An RGB raster with the few drawing operations the plots need. */
export class Canvas {
  readonly data: Uint8Array;
  /** Pixels outside this box are not drawn (x0, y0, x1, y1 inclusive). */
  clip: [number, number, number, number];

  constructor(
    readonly width: number,
    readonly height: number,
    background: Rgb = WHITE,
  ) {
    this.data = new Uint8Array(width * height * 3);
    for (let i = 0; i < width * height; i++) this.data.set(background, i * 3);
    this.clip = [0, 0, width - 1, height - 1];
  }

  set(x: number, y: number, c: Rgb): void {
    x = Math.round(x);
    y = Math.round(y);
    const [x0, y0, x1, y1] = this.clip;
    if (x < x0 || y < y0 || x > x1 || y > y1) return;
    this.data.set(c, (y * this.width + x) * 3);
  }

  rect(x0: number, y0: number, x1: number, y1: number, c: Rgb): void {
    for (let y = Math.round(y0); y <= Math.round(y1); y++) for (let x = Math.round(x0); x <= Math.round(x1); x++) this.set(x, y, c);
  }

  /** A line `thick` pixels wide; `dash` draws on/off runs of that many pixels. */
  line(x0: number, y0: number, x1: number, y1: number, c: Rgb, thick = 1, dash = 0): void {
    const steps = Math.max(1, Math.ceil(Math.max(Math.abs(x1 - x0), Math.abs(y1 - y0))));
    const lo = -Math.floor((thick - 1) / 2);
    const hi = lo + thick - 1;
    for (let s = 0; s <= steps; s++) {
      if (dash > 0 && Math.floor(s / dash) % 2 === 1) continue;
      const x = x0 + ((x1 - x0) * s) / steps;
      const y = y0 + ((y1 - y0) * s) / steps;
      for (let dy = lo; dy <= hi; dy++) for (let dx = lo; dx <= hi; dx++) this.set(x + dx, y + dy, c);
    }
  }

  marker(x: number, y: number, kind: Marker, c: Rgb, r = 4): void {
    for (let dy = -r; dy <= r; dy++) {
      for (let dx = -r; dx <= r; dx++) {
        const inside =
          kind === 'square' ? true
          : kind === 'circle' ? dx * dx + dy * dy <= r * r + 1
          : kind === 'diamond' ? Math.abs(dx) + Math.abs(dy) <= r
          : kind === 'triangle' ? dy >= -r && Math.abs(dx) * 2 <= dy + r
          : kind === 'cross' ? Math.abs(Math.abs(dx) - Math.abs(dy)) <= 0
          : dx === 0 || dy === 0;
        if (inside) this.set(x + dx, y + dy, c);
      }
    }
    if (kind === 'cross' || kind === 'plus') {
      // Thicken the thin markers by one pixel.
      for (let d = -r; d <= r; d++) {
        if (kind === 'cross') {
          this.set(x + d + 1, y + d, c);
          this.set(x + d + 1, y - d, c);
        } else {
          this.set(x + 1, y + d, c);
          this.set(x + d, y + 1, c);
        }
      }
    }
  }

  /** Width in pixels of `text` at `scale` (each font cell scale x scale pixels, one cell between glyphs). */
  static textWidth(text: string, scale: number): number {
    return text.length === 0 ? 0 : (text.length * (GLYPH_W + 1) - 1) * scale;
  }

  /** Text with its top-left at (x, y); `vertical` reads bottom to top with (x, y) the bottom-left. */
  text(x: number, y: number, text: string, c: Rgb, scale = 2, vertical = false): void {
    let pen = 0;
    for (const ch of text) {
      const cells = glyph(ch);
      const rows = cells.length / GLYPH_W; // GLYPH_H, or more for a descender
      for (let gy = 0; gy < rows; gy++) {
        for (let gx = 0; gx < GLYPH_W; gx++) {
          if (!cells[gy * GLYPH_W + gx]) continue;
          for (let sy = 0; sy < scale; sy++) {
            for (let sx = 0; sx < scale; sx++) {
              const u = (pen + gx) * scale + sx;
              const v = gy * scale + sy;
              if (vertical) this.set(x + v, y - u, c);
              else this.set(x + u, y + v, c);
            }
          }
        }
      }
      pen += GLYPH_W + 1;
    }
  }

  png(): Uint8Array {
    return encode({ width: this.width, height: this.height, data: this.data, channels: 3, depth: 8 });
  }
}

/** Round to 1, 2 or 5 times a power of ten. */
function nice(v: number): number {
  const p = 10 ** Math.floor(Math.log10(v));
  const f = v / p;
  return (f < 1.5 ? 1 : f < 3.5 ? 2 : f < 7.5 ? 5 : 10) * p;
}

/** Tick positions for [lo, hi]. */
export function ticks(lo: number, hi: number, log: boolean): number[] {
  if (log) {
    const out: number[] = [];
    const d0 = Math.floor(Math.log10(lo));
    const d1 = Math.ceil(Math.log10(hi));
    const decades = Math.log10(hi / lo);
    const mult = decades > 5 ? [1] : decades > 1.5 ? [1, 2, 5] : [1, 2, 3, 4, 5, 6, 7, 8, 9];
    for (let d = d0; d <= d1; d++) for (const m of mult) {
      const v = m * 10 ** d;
      if (v >= lo * (1 - 1e-9) && v <= hi * (1 + 1e-9)) out.push(v);
    }
    return out;
  }
  const step = nice((hi - lo) / 6);
  const out: number[] = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) out.push(Math.abs(v) < step * 1e-9 ? 0 : v);
  return out;
}

/** Short tick label. */
export function tickLabel(v: number): string {
  if (v === 0) return '0';
  const a = Math.abs(v);
  if (a >= 1e5 || a < 1e-3) {
    const e = Math.floor(Math.log10(a));
    const m = v / 10 ** e;
    return `${Number(m.toPrecision(2))}e${e}`;
  }
  return String(Number(v.toPrecision(3)));
}

/** Data limits of one axis, padded, or the fixed ones. */
function limits(values: number[], axis: Axis): [number, number] {
  const finite = values.filter((v) => Number.isFinite(v) && (!axis.log || v > 0));
  let lo = axis.min ?? (finite.length ? Math.min(...finite) : axis.log ? 1 : 0);
  let hi = axis.max ?? (finite.length ? Math.max(...finite) : axis.log ? 10 : 1);
  if (axis.log) {
    if (hi <= lo) [lo, hi] = [lo / 2, hi * 2];
    if (axis.min === undefined) lo /= 1.25;
    if (axis.max === undefined) hi *= 1.25;
  } else {
    if (hi <= lo) [lo, hi] = [lo - 1, hi + 1];
    const pad = (hi - lo) * 0.06;
    if (axis.min === undefined) lo -= pad;
    if (axis.max === undefined) hi += pad;
  }
  return [lo, hi];
}

/** Draw the plot and return PNG bytes. */
export function renderPlot(spec: PlotSpec): Uint8Array {
  const W = spec.width ?? 980;
  const H = spec.height ?? 620;
  const c = new Canvas(W, H);
  const legendW = 320;
  const box = { x0: 96, y0: 56, x1: W - legendW - 20, y1: H - 100 };
  const xs = spec.series.flatMap((s) => s.points.map((p) => p[0])).concat((spec.vlines ?? []).map((v) => v.x));
  const ys = spec.series.flatMap((s) => s.points.map((p) => p[1]));
  const [xlo, xhi] = limits(xs, spec.x);
  const [ylo, yhi] = limits(ys, spec.y);
  const tx = (v: number): number => {
    const f = spec.x.log ? Math.log(v / xlo) / Math.log(xhi / xlo) : (v - xlo) / (xhi - xlo);
    return box.x0 + f * (box.x1 - box.x0);
  };
  const ty = (v: number): number => {
    const f = spec.y.log ? Math.log(v / ylo) / Math.log(yhi / ylo) : (v - ylo) / (yhi - ylo);
    return box.y1 - f * (box.y1 - box.y0);
  };

  c.text((W - Canvas.textWidth(spec.title, 2)) / 2, 16, spec.title, BLACK, 2);
  for (const v of ticks(xlo, xhi, spec.x.log ?? false)) {
    const x = tx(v);
    c.line(x, box.y0, x, box.y1, GRID);
    c.line(x, box.y1, x, box.y1 + 6, BLACK);
    const label = tickLabel(v);
    c.text(x - Canvas.textWidth(label, 2) / 2, box.y1 + 12, label, BLACK, 2);
  }
  for (const v of ticks(ylo, yhi, spec.y.log ?? false)) {
    const y = ty(v);
    c.line(box.x0, y, box.x1, y, GRID);
    c.line(box.x0 - 6, y, box.x0, y, BLACK);
    const label = tickLabel(v);
    c.text(box.x0 - 10 - Canvas.textWidth(label, 2), y - 7, label, BLACK, 2);
  }
  c.line(box.x0, box.y0, box.x1, box.y0, BLACK);
  c.line(box.x0, box.y1, box.x1, box.y1, BLACK);
  c.line(box.x0, box.y0, box.x0, box.y1, BLACK);
  c.line(box.x1, box.y0, box.x1, box.y1, BLACK);
  const xl = spec.x.label + (spec.x.log ? ' (log scale)' : '');
  c.text((box.x0 + box.x1 - Canvas.textWidth(xl, 2)) / 2, box.y1 + 38, xl, BLACK, 2);
  if (spec.note) {
    const lines = wrap(spec.note, Math.floor((W - box.x0 - 8) / (Canvas.textWidth('x', 1) + 1)));
    lines.forEach((line, k) => c.text(box.x0, H - 12 - 11 * (lines.length - k), line, [90, 90, 90], 1));
  }
  const yl = spec.y.label + (spec.y.log ? ' (log scale)' : '');
  c.text(18, (box.y0 + box.y1 + Canvas.textWidth(yl, 2)) / 2, yl, BLACK, 2, true);

  c.clip = [box.x0 + 1, box.y0 + 1, box.x1 - 1, box.y1 - 1];
  for (const v of spec.vlines ?? []) {
    if (!(v.x > 0) && spec.x.log) continue;
    const x = tx(v.x);
    c.line(x, box.y0, x, box.y1, v.color, 2, 8);
  }
  for (const s of spec.series) {
    const by = s.connect === 'y' ? 1 : 0;
    const pts = s.points
      .map(([x, y], i) => ({ x, y, g: s.groups?.[i] ?? 0 }))
      .filter(({ x, y }) => Number.isFinite(x) && Number.isFinite(y) && (!spec.x.log || x > 0) && (!spec.y.log || y > 0))
      .sort((a, b) => (by ? a.y - b.y : a.x - b.x));
    if (s.connect !== 'none') {
      for (const g of new Set(pts.map((p) => p.g))) {
        const run = pts.filter((p) => p.g === g);
        for (let i = 1; i < run.length; i++) c.line(tx(run[i - 1].x), ty(run[i - 1].y), tx(run[i].x), ty(run[i].y), s.color, 2, s.dashed ? 6 : 0);
      }
    }
    for (const p of pts) c.marker(tx(p.x), ty(p.y), s.marker ?? 'square', s.color);
  }
  c.clip = [0, 0, W - 1, H - 1];

  // Legend, outside the plot box so it never hides a curve.
  let ly = box.y0 + 4;
  const lx = box.x1 + 24;
  for (const s of spec.series) {
    c.line(lx, ly + 7, lx + 34, ly + 7, s.color, 2, s.dashed ? 6 : 0);
    c.marker(lx + 17, ly + 7, s.marker ?? 'square', s.color);
    c.text(lx + 44, ly, s.name, BLACK, 2);
    ly += 26;
  }
  for (const v of spec.vlines ?? []) {
    c.line(lx + 17, ly - 2, lx + 17, ly + 16, v.color, 2, 4);
    c.text(lx + 44, ly, v.name, BLACK, 2);
    ly += 26;
  }
  return c.png();
}
