/**
 * Choosing how an N-D variable is laid out as 2-D fields, by bytes on a
 * sample: as slices of its last two axes ('slices'), or as a matrix whose
 * rows are its leading A axes and whose columns are the rest ('matrix:A'),
 * which puts a time x space stack of snapshots in one low-rank matrix.
 */
import { isPointwise, resolveBound } from './codec/bound.js';
import { InputCode, InputError } from './errors.js';
import { layoutGrid } from './format/schema.js';
import { cutBlock } from './geometry.js';
import { pack } from './pack.js';
import type { Bound, FloatArray } from './types.js';

/** Values packed per candidate in the trial (about). */
const SAMPLE_VALUES = 1 << 18;

/**
 * The layout of `values` (row-major, shape `shape`, at least 3 axes) whose
 * sample packs into the fewest bytes per value under `bound`: 'slices', or
 * 'matrix:A' for A = 1 .. k-2. Each candidate packs about 2^18 values of
 * its own grid (whole rows of the matrix, or whole slices), with the bound
 * made absolute from the whole variable's range so every trial keeps the
 * same tolerance.
 */
export function chooseLayout(values: FloatArray, shape: readonly number[], bound: Bound, fill: number | null): string {
  const k = shape.length;
  if (k < 3) throw new InputError(InputCode.Shape, `a layout is chosen for variables of 3 or more axes, this one has ${k}`);
  let lo = Infinity;
  let hi = -Infinity;
  for (let c = 0; c < values.length; c++) {
    const v = values[c];
    if (v !== v || v === fill || !Number.isFinite(v)) continue;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  if (!(hi >= lo)) return 'slices';
  const tol = resolveBound(bound, hi - lo);
  if (!(tol > 0)) return 'slices';
  const absolute: Bound = { mode: isPointwise(bound.mode) ? 'abs' : 'rmse', value: tol };
  const candidates = ['slices', ...Array.from({ length: k - 2 }, (_, a) => `matrix:${a + 1}`)];
  let best = 'slices';
  let bestRate = Infinity;
  for (const layout of candidates) {
    const g = layoutGrid(shape, layout) as { slices: number; rows: number; cols: number };
    // A sample of this grid: leading slices stacked as rows, or the matrix's rows over a block of columns.
    let rows: number;
    let cols: number;
    let sample: FloatArray;
    if (layout === 'slices') {
      const s = Math.max(1, Math.min(g.slices, Math.floor(SAMPLE_VALUES / (g.rows * g.cols))));
      rows = s * g.rows;
      cols = g.cols;
      sample = values.subarray(0, rows * cols);
    } else {
      cols = Math.max(1, Math.min(g.cols, Math.floor(SAMPLE_VALUES / g.rows)));
      rows = g.rows;
      const c0 = Math.floor((g.cols - cols) / 2);
      sample = cutBlock(values, g.cols, 0, c0, rows, cols);
    }
    const bytes = pack(sample, [rows, cols], { bound: absolute, fill, fillGuard: false }).length; // a sample; the caller guards the field
    const rate = bytes / (rows * cols);
    if (rate < bestRate) {
      bestRate = rate;
      best = layout;
    }
  }
  return best;
}
