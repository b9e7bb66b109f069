/**
 * The field layer: a rank-k product shared by every tile of a field
 * (spec/FORMAT.md, "Field layer"). Its two factors are stored as fields of
 * their own (f64, one row per row of the stacked field and one row per
 * column), so a window reads only the factor rows it touches; each tile's
 * own rank and residual are coded on top of the layer's term.
 */
import { type Grid, sliceRows, tileOrigin } from '../geometry.js';

/** The decoded factors of a field layer: what the reconstruction adds to every cell. */
export interface FieldLayer {
  /** Rank k, at least 1. */
  rank: number;
  /** Left factor rows, `rows x k` row-major (`left[i * k + K]`); rows of the stacked field (slices x rows). */
  left: Float64Array;
  /** Right factor rows, `cols x k` row-major (`right[j * k + K]`). */
  right: Float64Array;
}

/**
 * The layer's term for the cells of a block: `out[i * n + j] = ((+0 +
 * left[r0 + i, 0] * right[c0 + j, 0]) + left[r0 + i, 1] * right[c0 + j, 1]) + ...`,
 * one binary64 multiplication and one addition per rank, in increasing rank
 * order, from +0 (spec/FORMAT.md, "Reconstruction", step 2). `left` holds
 * at least the rows `r0 .. r0 + m - 1` counted from `leftRow0` (a window's
 * first factor row), `right` the rows `c0 .. c0 + n - 1` counted from
 * `rightRow0`.
 */
export function layerTerm(
  k: number,
  left: Float64Array,
  leftRow0: number,
  right: Float64Array,
  rightRow0: number,
  r0: number,
  c0: number,
  m: number,
  n: number,
  out: Float64Array = new Float64Array(m * n),
): Float64Array {
  out.fill(0, 0, m * n);
  // Rank by rank over the block: each cell's sum still takes its products in increasing rank order.
  for (let K = 0; K < k; K++) {
    for (let i = 0; i < m; i++) {
      const a = left[(r0 - leftRow0 + i) * k + K];
      const row = i * n;
      const w0 = (c0 - rightRow0) * k + K;
      for (let j = 0; j < n; j++) out[row + j] = out[row + j] + a * right[w0 + j * k];
    }
  }
  return out;
}

/** The layer's term for tile `t` of a field (an m x n tile at its place in the stacked field). */
export function tileLayerTerm(layer: FieldLayer, g: Grid, t: number, m: number, n: number): Float64Array {
  const { s, i0, j0 } = tileOrigin(g, t);
  return layerTerm(layer.rank, layer.left, 0, layer.right, 0, s * sliceRows(g) + i0, j0, m, n);
}

/** acc[c] = acc[c] + term[c]: the layer's term added after the tile's own low-rank part and centre. */
export function addLayer(acc: Float64Array, term: Float64Array, cells: number): void {
  for (let c = 0; c < cells; c++) acc[c] = acc[c] + term[c];
}
