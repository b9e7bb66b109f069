/**
 * Choosing how an N-D variable is laid out as 2-D fields, by bytes on a
 * sample: as slices of its last two axes ('slices'), or as a matrix whose
 * rows are its leading A axes and whose columns are the rest ('matrix:A'),
 * which puts a time x space stack of snapshots in one low-rank matrix.
 */
import { isPointwise, resolveBound } from './codec/bound.js';
import { InputCode, InputError } from './errors.js';
import { layoutGrid } from './format/schema.js';
import type { Sink } from './format/container.js';
import { ArchiveBuilder } from './pack.js';
import type { Bound, Dtype, FloatArray } from './types.js';

/** Values packed per candidate in the trial (about). */
const SAMPLE_VALUES = 1 << 18;

/** Min and max of the valid values (not NaN, infinite or `fill`), or null when there are none. */
export function validRange(values: FloatArray, fill: number | null, into: [number, number] = [Infinity, -Infinity]): [number, number] {
  let [lo, hi] = into;
  for (let c = 0; c < values.length; c++) {
    const v = values[c];
    if (v !== v || v === fill || !Number.isFinite(v)) continue;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  into[0] = lo;
  into[1] = hi;
  return into;
}

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
  const range = validRange(values, fill);
  return chooseLayoutFrom((start, count) => values.subarray(start, start + count), values instanceof Float32Array ? 'f32' : 'f64', shape, bound, fill, range);
}

/** Counts the bytes of an archive without keeping them. */
class CountingSink implements Sink {
  size = 0;
  write(bytes: Uint8Array): void {
    this.size += bytes.length;
  }
  patch(): void {}
}

/**
 * {@link chooseLayout} of values read from C-order positions by `read`
 * (a band at a time: each sample is read and packed a band of rows at a
 * time, so a variable larger than memory can have its layout chosen),
 * given their valid `range` ([Infinity, -Infinity] when there are none):
 * the same choice as {@link chooseLayout} of the values.
 */
export function chooseLayoutFrom(read: (start: number, count: number) => FloatArray, dtype: Dtype, shape: readonly number[], bound: Bound, fill: number | null, range: [number, number]): string {
  const k = shape.length;
  if (k < 3) throw new InputError(InputCode.Shape, `a layout is chosen for variables of 3 or more axes, this one has ${k}`);
  const [lo, hi] = range;
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
    let band: (r0: number, count: number) => FloatArray;
    if (layout === 'slices') {
      const s = Math.max(1, Math.min(g.slices, Math.floor(SAMPLE_VALUES / (g.rows * g.cols))));
      rows = s * g.rows;
      cols = g.cols;
      band = (r0, count) => read(r0 * cols, count * cols);
    } else {
      cols = Math.max(1, Math.min(g.cols, Math.floor(SAMPLE_VALUES / g.rows)));
      rows = g.rows;
      const c0 = Math.floor((g.cols - cols) / 2);
      band = (r0, count) => {
        const out = dtype === 'f32' ? new Float32Array(count * cols) : new Float64Array(count * cols);
        for (let i = 0; i < count; i++) out.set(read((r0 + i) * g.cols + c0, cols), i * cols);
        return out;
      };
    }
    // Packed band by band: the same bytes as packing the sample whole (a sample; the caller guards the field).
    const sink = new CountingSink();
    const b = new ArchiveBuilder(sink);
    b.addBands(band, [rows, cols], dtype, { bound: absolute, fill, fillGuard: false });
    b.finish();
    const rate = sink.size / (rows * cols);
    if (rate < bestRate) {
      bestRate = rate;
      best = layout;
    }
  }
  return best;
}
