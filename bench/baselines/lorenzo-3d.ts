/**
 * Baseline 3b, for time x space stacks only: the quantized integers of
 * baseline 2, predicted by the 3-D Lorenzo predictor over (snapshot, grid
 * row, grid column) (Ibarria, Lindstrom, Rossignac and Szymczak,
 * "Out-of-core compression and decompression of large n-dimensional scalar
 * fields", Eurographics 2003: the predictor of a cell is the alternating
 * sum of its 7 causal neighbours in the unit cube, zero outside the grid),
 * then zigzag byte planes and DEFLATE level 9: the twenty-line script a
 * careful user would write for a stack of snapshots. The snapshot's grid is
 * stored before the quantized stream.
 */
import { Reader, Writer } from './bytes.js';
import type { Codec } from './codec.js';
import { decodeQuantized, encodeQuantized, type Predictor } from './quantize.js';

/** 3-D Lorenzo over a (rows = snapshots) x (gridRows x gridCols) matrix: forward predicts, inverse restores. */
export function lorenzo3dPredictor(gridRows: number, gridCols: number): Predictor {
  const walk = (src: Int32Array, snapshots: number, cols: number, restore: boolean): Int32Array => {
    if (gridRows * gridCols !== cols) throw new Error(`lorenzo-3d: a grid of ${gridRows}x${gridCols} does not make ${cols} columns`);
    const out = new Int32Array(src.length);
    // Restoring reads the restored integers; predicting reads the originals.
    const q = restore ? out : src;
    const at = (t: number, i: number, j: number): number => (t < 0 || i < 0 || j < 0 ? 0 : q[t * cols + i * gridCols + j]);
    for (let t = 0; t < snapshots; t++) {
      for (let i = 0; i < gridRows; i++) {
        for (let j = 0; j < gridCols; j++) {
          const p = at(t - 1, i, j) + at(t, i - 1, j) + at(t, i, j - 1) - at(t - 1, i - 1, j) - at(t - 1, i, j - 1) - at(t, i - 1, j - 1) + at(t - 1, i - 1, j - 1);
          const c = t * cols + i * gridCols + j;
          out[c] = restore ? src[c] + p : src[c] - p;
        }
      }
    }
    return out;
  };
  return {
    forward: (q, rows, cols) => walk(q, rows, cols, false),
    inverse: (d, rows, cols) => walk(d, rows, cols, true),
  };
}

export const lorenzo3d: Codec = {
  id: 'lorenzo-3d',
  describe: 'for time x space stacks only: the quantized integers of `quantize`, 3-D Lorenzo prediction over (snapshot, grid row, grid column) (Ibarria et al., 2003), zigzag byte planes, DEFLATE level 9.',
  appliesTo: (field) => field.stack !== undefined,
  encode(field, target) {
    const [gridRows, gridCols] = field.stack ?? [0, 0];
    const w = new Writer();
    w.u32(gridRows);
    w.u32(gridCols);
    w.bytes(encodeQuantized(field, target, lorenzo3dPredictor(gridRows, gridCols)));
    return w.finish();
  },
  decode(bytes) {
    const r = new Reader(bytes);
    const gridRows = r.u32();
    const gridCols = r.u32();
    return decodeQuantized(bytes.subarray(8), lorenzo3dPredictor(gridRows, gridCols));
  },
};
