/**
 * The geometry of fields, slices and tiles, for writer, reader, index and
 * command line alike: a field is `slices` stacked rows x cols matrices
 * (C order: slice s is rows [s * rows, (s + 1) * rows) of the stacked
 * matrix), each cut into tileRows x tileCols tiles (edge tiles are partial;
 * tiles never cross slices), numbered slice by slice and row-major within a
 * slice: t = s * gr * gc + ti * gc + tj (spec/FORMAT.md, section 9).
 */
import type { FloatArray } from './types.js';

/** Largest tile side accepted (pack refuses larger tiles; src/pack.ts re-exports it). */
export const MAX_TILE_SIDE = 4096;

/**
 * A field's extent and tile shape, as the archive header spells them
 * (file keys, see FieldHeader): shape [rows, cols], tile [tileRows, tileCols].
 */
export interface HeaderGrid {
  shape: readonly number[];
  tile: readonly number[];
  slices?: number;
}

/** The same, as the encoder's FieldSpec spells it (library names, codec/tiles.ts). */
export interface SpecGrid {
  rows: number;
  cols: number;
  tileRows: number;
  tileCols: number;
  slices?: number;
}

/** A field's tiling in either spelling: every function here takes both. */
export type Grid = HeaderGrid | SpecGrid;

/** rows, cols, tileRows, tileCols of either spelling. */
function dims(g: Grid): [number, number, number, number] {
  return 'shape' in g ? [g.shape[0], g.shape[1], g.tile[0], g.tile[1]] : [g.rows, g.cols, g.tileRows, g.tileCols];
}

/** Rows of one slice (either spelling). */
export function sliceRows(g: Grid): number {
  return dims(g)[0];
}

/** Tiles of one slice: [tile rows, tile columns]. */
export function tileGrid(g: Grid): [number, number] {
  const [rows, cols, tr, tc] = dims(g);
  return [Math.ceil(rows / tr), Math.ceil(cols / tc)];
}

/** Total tiles of a field: slices x tiles per slice. */
export function tileCount(g: Grid): number {
  const [gr, gc] = tileGrid(g);
  return (g.slices ?? 1) * gr * gc;
}

/** The number of tile (ti, tj) of slice s. */
export function tileIndex(g: Grid, s: number, ti: number, tj: number): number {
  const [gr, gc] = tileGrid(g);
  return s * gr * gc + ti * gc + tj;
}

/** Where tile t lies: its slice s and its first row and column within the slice. */
export function tileOrigin(g: Grid, t: number): { s: number; i0: number; j0: number } {
  const [gr, gc] = tileGrid(g);
  const [, , tr, tc] = dims(g);
  const s = Math.floor(t / (gr * gc));
  const local = t - s * gr * gc;
  return { s, i0: Math.floor(local / gc) * tr, j0: (local % gc) * tc };
}

/** Rows and columns of tile t (edge tiles of each slice are partial). */
export function tileShape(g: Grid, t: number): [number, number] {
  const [rows, cols, tr, tc] = dims(g);
  const { i0, j0 } = tileOrigin(g, t);
  return [Math.min(tr, rows - i0), Math.min(tc, cols - j0)];
}

/** The tiles of slice s that rows [r0, r1) x cols [c0, c1) of it touch, in tile order. */
export function windowTiles(g: Grid, s: number, r0: number, r1: number, c0: number, c1: number): number[] {
  const [, , tr, tc] = dims(g);
  const out: number[] = [];
  for (let ti = Math.floor(r0 / tr); ti * tr < r1; ti++) for (let tj = Math.floor(c0 / tc); tj * tc < c1; tj++) out.push(tileIndex(g, s, ti, tj));
  return out;
}

/**
 * Copy an m x n block: rows [r0, r0 + m) x cols [c0, c0 + n) of `from`
 * (row-major, `fromCols` columns) to rows [dr, dr + m) x cols [dc, dc + n)
 * of `to` (`toCols` columns). Same-type typed-array copies move bytes, so
 * NaN payloads survive.
 */
export function copyBlock(from: FloatArray, fromCols: number, r0: number, c0: number, m: number, n: number, to: FloatArray, toCols: number, dr: number, dc: number): void {
  // Whole rows of both: one copy (a row at a time costs a subarray each).
  if (n === fromCols && n === toCols) {
    to.set(from.subarray(r0 * n, (r0 + m) * n), dr * n);
    return;
  }
  for (let i = 0; i < m; i++) to.set(from.subarray((r0 + i) * fromCols + c0, (r0 + i) * fromCols + c0 + n), (dr + i) * toCols + dc);
}

/** Rows [r0, r0 + m) x cols [c0, c0 + n) of `values` (row-major, `cols` columns) as a new array of the same type. */
export function cutBlock(values: FloatArray, cols: number, r0: number, c0: number, m: number, n: number): FloatArray {
  const out = values instanceof Float32Array ? new Float32Array(m * n) : new Float64Array(m * n);
  copyBlock(values, cols, r0, c0, m, n, out, n, 0, 0);
  return out;
}

/** Tile t cut out of a whole field's values (all slices, C order). */
export function cutTile(values: FloatArray, g: Grid, t: number): FloatArray {
  const [rows, cols] = dims(g);
  const { s, i0, j0 } = tileOrigin(g, t);
  const [m, n] = tileShape(g, t);
  return cutBlock(values, cols, s * rows + i0, j0, m, n);
}

/**
 * The shape of a field's values as the user gave them: its N-D shape when
 * the header records one, else [slices, rows, cols] for more than one
 * slice, else [rows, cols].
 */
export function ndShape(h: HeaderGrid & { nd_shape?: number[] }): number[] {
  if (h.nd_shape) return h.nd_shape.slice();
  return (h.slices ?? 1) > 1 ? [h.slices!, h.shape[0], h.shape[1]] : h.shape.slice();
}
