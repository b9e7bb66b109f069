/**
 * The grids a picture draws, read from an archive a band at a time: one
 * cell per block of `block` x `block` field cells, so a large field is drawn
 * from a decimated read whose memory is one band of tiles plus the picture.
 * Values are averaged over a block's valid cells (missing when it has
 * none); errors take the block's largest, so no error hides in an average;
 * ranks take the tile the block's first cell lies in.
 */
import { hasSlices, type Archive } from '../archive.js';
import { Method } from '../codec/payload.js';
import { sliceGrid } from '../format/schema.js';
import type { FloatArray } from '../types.js';

/** A window of one slice of a field. */
export interface PictureWindow {
  slice: number;
  rows: [number, number];
  cols: [number, number];
}

/** A grid of picture cells, row-major; NaN marks missing cells. */
export interface Grid {
  cells: Float64Array;
  rows: number;
  cols: number;
  /** Field cells per picture cell along each side. */
  block: number;
  /** Field cells that were missing (NaN, infinities, the fill value). */
  missing: number;
}

/** Code of an exactly stored tile in a rank grid. */
export const EXACT_CODE = -1;

/** Field cells per picture cell so that the longer side of the window is at most `maxSide` picture cells. */
export function blockFor(w: PictureWindow, maxSide: number): number {
  return Math.max(1, Math.ceil(Math.max(w.rows[1] - w.rows[0], w.cols[1] - w.cols[0]) / maxSide));
}

/**
 * Block means of the decoded values, and with `original` (the slice's
 * values, rows x cols of the field, row-major) the block maxima of
 * |decoded - original| / `tolerance` over the original's valid cells.
 */
export async function readGrids(archive: Archive, name: string, w: PictureWindow, block: number, original?: FloatArray, tolerance = 1): Promise<{ values: Grid; errors: Grid | null }> {
  const { header: h } = archive.field(name);
  const [r0, r1] = w.rows;
  const [c0, c1] = w.cols;
  const rows = Math.ceil((r1 - r0) / block);
  const cols = Math.ceil((c1 - c0) / block);
  const sum = new Float64Array(rows * cols);
  const count = new Float64Array(rows * cols);
  const worst = original ? new Float64Array(rows * cols).fill(Number.NaN) : null;
  const fill = h.fill === null ? null : h.dtype === 'f32' ? Math.fround(h.fill) : h.fill;
  const valid = (v: number) => Number.isFinite(v) && v !== fill;
  // Bands of whole blocks, at least one tile row high.
  const band = block * Math.ceil(h.tile[0] / block);
  let missing = 0;
  for (let b0 = r0; b0 < r1; b0 += band) {
    const b1 = Math.min(r1, b0 + band);
    const got = await archive.read(h.name, { ...(hasSlices(h) ? { slices: [w.slice, w.slice + 1] as [number, number] } : {}), rows: [b0, b1], cols: [c0, c1] });
    const width = c1 - c0;
    for (let r = b0; r < b1; r++) {
      const gi = Math.floor((r - r0) / block) * cols;
      for (let c = c0; c < c1; c++) {
        const v = got.values[(r - b0) * width + (c - c0)];
        const g = gi + Math.floor((c - c0) / block);
        if (!valid(v)) {
          missing++;
          continue;
        }
        sum[g] += v;
        count[g]++;
        if (worst && original) {
          const o = original[r * h.shape[1] + c];
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

/** The rank of the tile under each picture cell; exactly stored tiles as {@link EXACT_CODE}. Reads the index only. */
export async function rankGrid(archive: Archive, name: string, w: PictureWindow, block: number): Promise<Grid> {
  const { header: h } = archive.field(name);
  const ix = await archive.fieldIndex(h.name);
  const [gr, gc] = sliceGrid(h);
  const rows = Math.ceil((w.rows[1] - w.rows[0]) / block);
  const cols = Math.ceil((w.cols[1] - w.cols[0]) / block);
  const cells = new Float64Array(rows * cols);
  for (let i = 0; i < rows; i++) {
    const ti = Math.floor((w.rows[0] + i * block) / h.tile[0]);
    for (let j = 0; j < cols; j++) {
      const t = w.slice * gr * gc + ti * gc + Math.floor((w.cols[0] + j * block) / h.tile[1]);
      cells[i * cols + j] = ix.method[t] === Method.Exact ? EXACT_CODE : ix.rank[t];
    }
  }
  return { cells, rows, cols, block, missing: 0 };
}
