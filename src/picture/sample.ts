/**
 * The grids a picture draws, read from an archive a band at a time: one
 * cell per block of `block` x `block` cells of a plane, so a large field is
 * drawn from a decimated read whose memory is one band of tiles plus the
 * picture. Values are averaged over a block's valid cells (missing when it
 * has none); errors take the block's largest, so no error hides in an
 * average; ranks take the tile the block's first cell lies in.
 *
 * A plane is what a picture shows of a field: one stored 2-D slice, or, for
 * a field stored as a matrix (layout matrix:A, one snapshot per row), one
 * row of the matrix laid out over the variable's last two axes.
 */
import { hasSlices, type Archive } from '../archive.js';
import { Method } from '../codec/payload.js';
import type { FieldHeader, FieldIndex } from '../format/schema.js';
import { cutBlock, tileIndex } from '../geometry.js';
import type { FloatArray } from '../types.js';

/** A 2-D plane of a field, readable by windows. */
export interface Plane {
  rows: number;
  cols: number;
  /** Rows of a read that decodes whole tiles. */
  band: number;
  /** Plane rows [r0, r1) and columns [c0, c1), row-major. */
  read(r0: number, r1: number, c0: number, c1: number): Promise<FloatArray>;
  /** The tile holding plane cell (r, c). */
  tileAt(r: number, c: number): number;
}

/** A window of a plane. */
export interface PictureWindow {
  /** The stored slice, or the matrix row, the plane shows. */
  slice: number;
  rows: [number, number];
  cols: [number, number];
}

/** A grid of picture cells, row-major; NaN marks missing cells. */
export interface Grid {
  cells: Float64Array;
  rows: number;
  cols: number;
  /** Plane cells per picture cell along each side. */
  block: number;
  /** Plane cells that were missing (NaN, infinities, the fill value). */
  missing: number;
}

/** Code of an exactly stored tile in a rank grid. */
export const EXACT_CODE = -1;

/** Slice `slice` of a field as stored (slice 0 of a plain field). */
export function slicePlane(archive: Archive, h: FieldHeader, slice: number): Plane {
  return {
    rows: h.shape[0],
    cols: h.shape[1],
    band: h.tile[0],
    read: async (r0, r1, c0, c1) => (await archive.read(h.name, { ...(hasSlices(h) ? { slices: [slice, slice + 1] as [number, number] } : {}), rows: [r0, r1], cols: [c0, c1] })).values,
    tileAt: (r, c) => tileIndex(h, slice, Math.floor(r / h.tile[0]), Math.floor(c / h.tile[1])),
  };
}

/**
 * The last two axes of a matrix-layout field's N-D shape, for one row of
 * the matrix (one snapshot), as rows (all axes but the last, flattened) x
 * the last axis; null for other fields, or when the row holds only one axis.
 */
export function snapshotShape(h: FieldHeader): [number, number] | null {
  const m = h.layout === undefined ? null : /^matrix:([0-9]+)$/.exec(h.layout);
  if (m === null || h.nd_shape === undefined) return null;
  const rest = h.nd_shape.slice(Number(m[1]));
  if (rest.length < 2) return null;
  const cols = rest[rest.length - 1];
  return [h.shape[1] / cols, cols];
}

/** Row `row` of a matrix-layout field, laid out as {@link snapshotShape}. */
export function snapshotPlane(archive: Archive, h: FieldHeader, row: number): Plane {
  const [rows, cols] = snapshotShape(h)!;
  return {
    rows,
    cols,
    // Plane rows [r0, r1) are matrix columns [r0 * cols, r1 * cols) of the row: contiguous.
    band: Math.max(1, Math.ceil(h.tile[1] / cols)),
    read: async (r0, r1, c0, c1) => {
      const got = (await archive.read(h.name, { rows: [row, row + 1], cols: [r0 * cols, r1 * cols] })).values;
      if (c0 === 0 && c1 === cols) return got;
      return cutBlock(got, cols, 0, c0, r1 - r0, c1 - c0);
    },
    tileAt: (r, c) => tileIndex(h, 0, Math.floor(row / h.tile[0]), Math.floor((r * cols + c) / h.tile[1])),
  };
}

/** Plane cells per picture cell so that the longer side of the window is at most `maxSide` picture cells. */
export function blockFor(w: PictureWindow, maxSide: number): number {
  return Math.max(1, Math.ceil(Math.max(w.rows[1] - w.rows[0], w.cols[1] - w.cols[0]) / maxSide));
}

/**
 * Block means of the decoded values, and with `original` (the plane's
 * values, plane rows x columns, row-major; or a reader of its rows [r0, r0 +
 * count), whole width, called once per band so the original is never held
 * whole) the block maxima of |decoded - original| / `tolerance` over the
 * original's valid cells.
 */
export async function readGrids(plane: Plane, h: Pick<FieldHeader, 'fill' | 'dtype'>, w: PictureWindow, block: number, original?: FloatArray | ((r0: number, count: number) => FloatArray), tolerance = 1): Promise<{ values: Grid; errors: Grid | null }> {
  const [r0, r1] = w.rows;
  const [c0, c1] = w.cols;
  const rows = Math.ceil((r1 - r0) / block);
  const cols = Math.ceil((c1 - c0) / block);
  const sum = new Float64Array(rows * cols);
  const count = new Float64Array(rows * cols);
  const worst = original ? new Float64Array(rows * cols).fill(Number.NaN) : null;
  const fill = h.fill === null ? null : h.dtype === 'f32' ? Math.fround(h.fill) : h.fill;
  const valid = (v: number) => Number.isFinite(v) && v !== fill;
  // Bands of whole blocks, at least the plane's natural band high.
  const band = block * Math.ceil(plane.band / block);
  const width = c1 - c0;
  let missing = 0;
  for (let b0 = r0; b0 < r1; b0 += band) {
    const b1 = Math.min(r1, b0 + band);
    const got = await plane.read(b0, b1, c0, c1);
    // The original's rows of this band (all of it when given whole).
    const orig = original === undefined ? undefined : typeof original === 'function' ? original(b0, b1 - b0) : original;
    const first = typeof original === 'function' ? b0 : 0;
    for (let r = b0; r < b1; r++) {
      const gi = Math.floor((r - r0) / block) * cols;
      for (let c = c0; c < c1; c++) {
        const v = got[(r - b0) * width + (c - c0)];
        const g = gi + Math.floor((c - c0) / block);
        if (!valid(v)) {
          missing++;
          continue;
        }
        sum[g] += v;
        count[g]++;
        if (worst && orig) {
          const o = orig[(r - first) * plane.cols + c];
          if (!valid(o)) continue;
          const e = Math.abs(v - o) / tolerance;
          if (!(e <= worst[g])) worst[g] = e;
        }
      }
    }
  }
  const cells = new Float64Array(rows * cols);
  for (let g = 0; g < cells.length; g++) cells[g] = count[g] > 0 ? sum[g] / count[g] : Number.NaN;
  return { values: { cells, rows, cols, block, missing }, errors: worst ? { cells: worst, rows, cols, block, missing } : null };
}

/** The rank of the tile under each picture cell, from the field's index; exactly stored tiles as {@link EXACT_CODE}. */
export function rankGrid(plane: Plane, ix: Pick<FieldIndex, 'method' | 'rank'>, w: PictureWindow, block: number): Grid {
  const rows = Math.ceil((w.rows[1] - w.rows[0]) / block);
  const cols = Math.ceil((w.cols[1] - w.cols[0]) / block);
  const cells = new Float64Array(rows * cols);
  for (let i = 0; i < rows; i++) {
    for (let j = 0; j < cols; j++) {
      const t = plane.tileAt(w.rows[0] + i * block, w.cols[0] + j * block);
      cells[i * cols + j] = ix.method[t] === Method.Exact ? EXACT_CODE : ix.rank[t];
    }
  }
  return { cells, rows, cols, block, missing: 0 };
}
