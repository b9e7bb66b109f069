/**
 * A heatmap picture: a grid of cells drawn in a perceptually uniform colour
 * map, a colour bar with its scale and label, a title, notes, missing cells
 * in a neutral grey, and cells of special codes (such as exactly stored
 * tiles) in colours of their own with a legend. Pure: cells in, raster out.
 */
import { mapColour, MISSING, type MapName, type Rgb } from './colormap.js';
import { BLACK, Raster, wrap } from './raster.js';
import { tickLabel, ticks } from './scale.js';

export { tickLabel, ticks } from './scale.js';

export { MISSING } from './colormap.js';

/** A code drawn in its own colour, with a legend entry. */
export interface Special {
  code: number;
  colour: Rgb;
  label: string;
}

/** What a heatmap shows. */
export interface HeatmapSpec {
  /** Row-major cell values; NaN: missing (drawn grey). */
  cells: Float64Array;
  rows: number;
  cols: number;
  /** Pixels per cell along each side (a positive integer). */
  scale: number;
  map: MapName;
  /** The values at the ends of the colour bar (clamped beyond). */
  lo: number;
  hi: number;
  /** Draw the bar as whole-number classes lo..hi (ranks), one colour step each. */
  discrete?: boolean;
  /** Label over the colour bar (the quantity and its unit). */
  barLabel: string;
  /** Title lines (wrapped to the picture's width). */
  title: string[];
  /** Note lines under the picture. */
  notes: string[];
  /** Codes drawn in colours of their own (their values are outside lo..hi). */
  specials?: Special[];
  /** Draw a legend swatch for missing cells (when some are missing). */
  missing?: boolean;
  /** Lines drawn between cells: before these picture rows and columns (tile edges). */
  edges?: { rows: number[]; cols: number[] };
}

const PAD = 16;
const TEXT = 2;
const LINE = Raster.lineHeight(TEXT);
const BAR_W = 20;
const BAR_MIN_H = 200;

/** The colour of one cell value. */
export function cellColour(spec: Pick<HeatmapSpec, 'map' | 'lo' | 'hi' | 'discrete' | 'specials'>, v: number): Rgb {
  if (Number.isNaN(v)) return MISSING;
  const special = spec.specials?.find((s) => s.code === v);
  if (special) return special.colour;
  if (spec.discrete) {
    const classes = spec.hi - spec.lo + 1;
    // Class k of n takes the centre of its n-th of the map.
    return mapColour(spec.map, classes <= 1 ? 0.5 : (Math.min(Math.max(Math.round(v), spec.lo), spec.hi) - spec.lo) / (classes - 1));
  }
  return mapColour(spec.map, spec.hi > spec.lo ? (v - spec.lo) / (spec.hi - spec.lo) : 0.5);
}

/** Draw the heatmap. */
export function heatmap(spec: HeatmapSpec): Raster {
  const imgW = spec.cols * spec.scale;
  const imgH = spec.rows * spec.scale;
  const barH = Math.max(imgH, BAR_MIN_H);
  const tv = ticks(spec.lo, spec.hi, spec.discrete);
  const labels = tv.map(tickLabel);
  const labelW = Math.max(...labels.map((l) => Raster.textWidth(l, TEXT)), 0);
  const legend = [...(spec.specials ?? []).map((s) => ({ colour: s.colour, label: s.label })), ...(spec.missing ? [{ colour: MISSING, label: 'missing' }] : [])];
  const legendW = Math.max(0, ...legend.map((l) => BAR_W + 8 + Raster.textWidth(l.label, TEXT)));
  const barX = PAD + imgW + 24;
  const sideW = Math.max(BAR_W + 8 + labelW, legendW, Raster.textWidth(spec.barLabel, TEXT));
  const width = Math.max(barX + sideW + PAD, 600);
  // Characters per line: each glyph and its gap take 6 font cells.
  const chars = Math.floor((width - 2 * PAD) / (6 * TEXT));
  const title = spec.title.flatMap((t) => wrap(t, chars));
  const notes = spec.notes.flatMap((t) => wrap(t, chars));
  const top = PAD + title.length * LINE + 8;
  const barTop = top + LINE;
  const legendH = legend.length * (LINE + 4);
  const bodyH = Math.max(imgH, LINE + barH + 8 + legendH);
  const height = top + bodyH + 12 + notes.length * LINE + PAD;
  const r = new Raster(width, height);
  title.forEach((t, i) => r.text(PAD, PAD + i * LINE, t, BLACK, TEXT));
  // The cells, scale x scale pixels each.
  for (let i = 0; i < spec.rows; i++) {
    for (let j = 0; j < spec.cols; j++) {
      const c = cellColour(spec, spec.cells[i * spec.cols + j]);
      r.fill(PAD + j * spec.scale, top + i * spec.scale, PAD + (j + 1) * spec.scale, top + (i + 1) * spec.scale, c);
    }
  }
  for (const i of spec.edges?.rows ?? []) if (i > 0 && i < spec.rows) r.fill(PAD, top + i * spec.scale, PAD + imgW, top + i * spec.scale + 1, BLACK);
  for (const j of spec.edges?.cols ?? []) if (j > 0 && j < spec.cols) r.fill(PAD + j * spec.scale, top, PAD + j * spec.scale + 1, top + imgH, BLACK);
  r.frame(PAD, top, PAD + imgW, top + imgH, BLACK);
  // The colour bar: lo at the bottom, hi at the top.
  r.text(barX, top, spec.barLabel, BLACK, TEXT);
  for (let y = 0; y < barH; y++) {
    const t = 1 - y / Math.max(1, barH - 1);
    const v = spec.lo + t * (spec.hi - spec.lo);
    r.fill(barX, barTop + y, barX + BAR_W, barTop + y + 1, cellColour({ ...spec, specials: [] }, v));
  }
  r.frame(barX, barTop, barX + BAR_W, barTop + barH, BLACK);
  tv.forEach((v, k) => {
    const y = spec.hi > spec.lo ? barTop + Math.round((1 - (v - spec.lo) / (spec.hi - spec.lo)) * (barH - 1)) : barTop + Math.floor(barH / 2);
    r.fill(barX + BAR_W, y, barX + BAR_W + 5, y + 1, BLACK);
    r.text(barX + BAR_W + 8, Math.max(barTop, y - (7 * TEXT) / 2), labels[k], BLACK, TEXT);
  });
  legend.forEach((l, k) => {
    const y = barTop + barH + 12 + k * (LINE + 4);
    r.fill(barX, y, barX + BAR_W, y + 7 * TEXT, l.colour);
    r.frame(barX, y, barX + BAR_W, y + 7 * TEXT, BLACK);
    r.text(barX + BAR_W + 8, y, l.label, BLACK, TEXT);
  });
  notes.forEach((t, i) => r.text(PAD, top + bodyH + 12 + i * LINE, t, BLACK, TEXT));
  return r;
}
