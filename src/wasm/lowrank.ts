/**
 * The low-rank product of a tile's reconstruction, and the rest of it, in
 * the WebAssembly kernels (kernels/lowrank.ts, in the linear-algebra
 * module): the same bits as lowRank and reconstruct in
 * src/codec/reconstruct.ts (NaN: NaN-ness, which no decoded value keeps).
 */
import { LINALG_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The exports of kernels/lowrank.ts: addresses are byte offsets into the kernels' memory. */
interface LowRankKernels {
  lowRank(l: number, w: number, m: number, n: number, r: number, center: number, out: number): void;
  finishBand(acc: number, cells: number, q: number, step: number, out: number, f32: number): number;
}

/** Outputs a kernel call makes at most (1 MiB of binary64): a large tile is done in bands of rows, so the kernels' memory holds w and one band. */
const BAND_CELLS = 1 << 17;

/**
 * out[0, m n) = l w + center, as lowRank (`l` m x r, `w` r x n, row-major),
 * by the kernel: false when the kernel is not to be had (the caller
 * computes).
 */
export function lowRankKernel(l: Float64Array, w: Float64Array, m: number, n: number, r: number, center: number, out: Float64Array): boolean {
  return inBands(l, w, m, n, r, center, null, 0, out, false) !== null;
}

/**
 * The decoder's whole reconstruction of a tile without a field layer, by
 * the kernels: lowRank(l, w, m, n, r, center), then reconstruct(that, q,
 * step, out) into `out` (m n values). Whether every value is finite, as
 * reconstruct returns it; null when the kernels are not to be had (the
 * caller computes).
 */
export function reconstructKernel(l: Float64Array, w: Float64Array, m: number, n: number, r: number, center: number, q: Int32Array | null, step: number, out: Float32Array | Float64Array): boolean | null {
  return inBands(l, w, m, n, r, center, q, step, out, true);
}

/** Both of the above: the product band by band, then (with `finish`) the residual and rounding; the finite flag, or null without kernels. */
function inBands(l: Float64Array, w: Float64Array, m: number, n: number, r: number, center: number, q: Int32Array | null, step: number, out: Float32Array | Float64Array, finish: boolean): boolean | null {
  const cells = m * n;
  if (l.length < m * r || w.length < r * n || out.length < cells || (q !== null && q.length < cells)) return null;
  const k = kernels();
  if (k === null) return null;
  const rows = Math.max(1, Math.min(m, Math.floor(BAND_CELLS / n)));
  const f32 = out instanceof Float32Array;
  // From SCRATCH_AT, in binary64 units: w, then a band's rows of l, of the product, of the output (binary64 or
  // binary32) and of q (i32).
  const wAt = SCRATCH_AT / 8;
  const lAt = wAt + r * n;
  const accAt = lAt + rows * r;
  const outAt = finish ? accAt + rows * n : accAt;
  const qAt = outAt + rows * n;
  if (!k.lease(8 * qAt + 4 * rows * n - SCRATCH_AT)) return null;
  try {
    const fn = k.module<LowRankKernels>(LINALG_KERNELS);
    if (fn === null) return null;
    const heap = k.f64;
    const view = f32 ? k.f32 : heap;
    const unit = f32 ? 2 : 1;
    // Whole arrays go in as they are, without a view made of each (rank 0 has no factors to copy).
    if (r > 0) heap.set(w.length === r * n ? w : w.subarray(0, r * n), wAt);
    let finite = true;
    for (let i = 0; i < m; i += rows) {
      const band = Math.min(rows, m - i);
      if (r > 0) heap.set(band === m && l.length === m * r ? l : l.subarray(i * r, (i + band) * r), lAt);
      fn.lowRank(8 * lAt, 8 * wAt, band, n, r, center, 8 * accAt);
      if (finish) {
        if (q !== null) k.i32.set(band === m && q.length === cells ? q : q.subarray(i * n, (i + band) * n), 2 * qAt);
        if (fn.finishBand(8 * accAt, band * n, q === null ? 0 : 8 * qAt, step, 8 * outAt, f32 ? 1 : 0) === 0) finite = false;
      }
      out.set(view.subarray(unit * outAt, unit * outAt + band * n), i * n);
    }
    return finite;
  } finally {
    k.release();
  }
}
