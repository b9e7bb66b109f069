/**
 * The refit of a candidate's right factor in the WebAssembly kernels
 * (kernels/refit.ts, the module REFIT_KERNELS): b += Lq^T A as
 * quantizeFactors in src/codec/tile-encode.ts sums it, band by band of the
 * tile's rows; the same bits. False where the kernels are not to be had,
 * and the caller runs the JavaScript.
 */
import { REFIT_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The export of kernels/refit.ts: addresses are byte offsets into the kernels' memory. */
interface RefitKernels {
  refitBand(l: number, r: number, a: number, rows: number, n: number, b: number, nz: number): void;
}

/** Cells of the tile a kernel call takes at most (a band of rows: 512 KiB of binary64, within a core's second-level cache; common practice, no source). */
const BAND_CELLS = 1 << 16;

/**
 * b (r x n, row-major, every entry written) = l^T a, l (m x r) and a (m x n) row-major,
 * each entry summed over the rows i in increasing order, skipping a row
 * whose l[i, k] is zero; false (b untouched) when the kernels are not to
 * be had.
 */
export function refitKernel(l: Float64Array, r: number, a: Float64Array, m: number, n: number, b: Float64Array): boolean {
  if (r < 1 || n < 1 || l.length < m * r || a.length < m * n || b.length < r * n) return false;
  const k = kernels();
  if (k === null) return false;
  const rows = Math.max(1, Math.min(m, Math.floor(BAND_CELLS / n)));
  // In doubles from SCRATCH_AT: b (r x n), a band of l (rows x r) and of a (rows x n); then r i32.
  const bAt = SCRATCH_AT / 8;
  const lAt = bAt + r * n;
  const aAt = lAt + rows * r;
  const nzAt = aAt + rows * n;
  if (!k.lease(8 * nzAt + 4 * r - SCRATCH_AT)) return false;
  try {
    const fn = k.module<RefitKernels>(REFIT_KERNELS);
    if (fn === null) return false;
    const heap = k.f64;
    heap.fill(0, bAt, bAt + r * n);
    for (let i0 = 0; i0 < m; i0 += rows) {
      const count = Math.min(rows, m - i0);
      heap.set(l.subarray(i0 * r, (i0 + count) * r), lAt);
      heap.set(a.subarray(i0 * n, (i0 + count) * n), aAt);
      fn.refitBand(8 * lAt, r, 8 * aAt, count, n, 8 * bAt, 8 * nzAt);
    }
    b.set(heap.subarray(bAt, bAt + r * n));
    return true;
  } finally {
    k.release();
  }
}
