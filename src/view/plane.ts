/**
 * What the viewer draws of a field: a 2-D plane, read by blocks. Browser-safe
 * (no Node built-ins); used by the page (page.ts) and by its tests.
 *
 * A plane is one stored slice of a field (a plain 2-D field has one), or for
 * a field stored as a matrix (layout matrix:A, one snapshot per row) one row
 * of the matrix laid out over the variable's remaining axes, as `preview`
 * draws it. Either way the plane's cells are one contiguous run of the
 * field's C-order values, so a cell's N-D index follows from its offset.
 */
import type { FieldHeader } from '../format/schema.js';

/** How a field is cut into planes and each plane into blocks (the unit of reading and caching). */
export interface PlaneLayout {
  /** Planes to choose among (slices, or snapshots of a matrix), at least 1. */
  count: number;
  /** What one plane is called: 'slice', 'snapshot' or '' (a plain field). */
  what: string;
  /** Rows and columns of one plane. */
  rows: number;
  cols: number;
  /** Rows and columns of a block (the field's tile, or a band of whole snapshot rows). */
  blockRows: number;
  blockCols: number;
  /** Cells of one plane (its offset stride in the field's C-order values). */
  size: number;
}

/** True for a field stored as slices (as the decoder's read expects a `slices` range). */
export function sliceStored(h: FieldHeader): boolean {
  return (h.slices ?? 1) > 1 || h.layout === 'slices';
}

/** The number of leading axes a matrix layout flattens into rows, or null for other layouts. */
export function matrixLead(h: FieldHeader): number | null {
  const m = h.layout === undefined ? null : /^matrix:([0-9]+)$/.exec(h.layout);
  return m === null ? null : Number(m[1]);
}

/** The planes of a field. */
export function planeLayout(h: FieldHeader): PlaneLayout {
  const [rows, cols] = h.shape;
  const [tr, tc] = h.tile;
  const lead = matrixLead(h);
  if (lead !== null && h.nd_shape !== undefined && h.nd_shape.length - lead >= 2) {
    // One matrix row laid out over the remaining axes: all but the last flattened into rows.
    const last = h.nd_shape[h.nd_shape.length - 1];
    const pr = cols / last;
    return { count: rows, what: 'snapshot', rows: pr, cols: last, blockRows: Math.max(1, Math.ceil(tc / last)), blockCols: last, size: cols };
  }
  const count = sliceStored(h) ? (h.slices ?? 1) : 1;
  return { count, what: sliceStored(h) ? 'slice' : '', rows, cols, blockRows: tr, blockCols: tc, size: rows * cols };
}

/** The window of the field's stored matrix that holds rows [r0, r1) and columns [c0, c1) of plane `p`, as the decoder's read options. */
export function readWindow(h: FieldHeader, L: PlaneLayout, p: number, r0: number, r1: number, c0: number, c1: number): { slices?: [number, number]; rows: [number, number]; cols: [number, number] } {
  if (L.what === 'snapshot') return { rows: [p, p + 1], cols: [r0 * L.cols, r1 * L.cols] };
  return { ...(sliceStored(h) ? { slices: [p, p + 1] as [number, number] } : {}), rows: [r0, r1], cols: [c0, c1] };
}

/** The N-D index of cell (r, c) of plane p (C order over nd_shape, or [r, c] for a field without one). */
export function ndIndex(h: FieldHeader, L: PlaneLayout, p: number, r: number, c: number): number[] {
  const nd = h.nd_shape;
  if (nd === undefined) return L.count > 1 ? [p, r, c] : [r, c];
  let flat = p * L.size + r * L.cols + c;
  const out = new Array<number>(nd.length);
  for (let a = nd.length - 1; a >= 0; a--) {
    out[a] = flat % nd[a];
    flat = Math.floor(flat / nd[a]);
  }
  return out;
}

/** The tile holding cell (r, c) of plane p, for planes whose blocks are tiles (not snapshots); else null. */
export function tileOf(h: FieldHeader, L: PlaneLayout, p: number, r: number, c: number): number | null {
  if (L.what === 'snapshot') return null;
  const gr = Math.ceil(h.shape[0] / h.tile[0]);
  const gc = Math.ceil(h.shape[1] / h.tile[1]);
  return p * gr * gc + Math.floor(r / h.tile[0]) * gc + Math.floor(c / h.tile[1]);
}

/**
 * The sampling step of a view: the largest power of two at most `1 / scale`
 * cells per pixel (1 when a cell takes a pixel or more). A pixel shows the
 * cell under its centre, its row and column each rounded down to a multiple
 * of the step, so a view zoomed out by 2^j needs only every 2^j-th cell of
 * each block kept.
 */
export function stepOf(scale: number): number {
  if (!(scale < 1)) return 1;
  let k = 1;
  while (k * 2 * scale <= 1 + 1e-9 && k < 1 << 20) k *= 2;
  return k;
}
