/**
 * The low-rank product of a tile's reconstruction in the WebAssembly kernel
 * (kernels/lowrank.ts, in the linear-algebra module): the same bits as
 * lowRank in src/codec/reconstruct.ts, which calls this first.
 */
import { LINALG_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The product of kernels/lowrank.ts: addresses are byte offsets into the kernels' memory. */
interface LowRankKernel {
  lowRank(l: number, w: number, m: number, n: number, r: number, center: number, out: number): void;
}

/** Outputs a kernel call makes at most (1 MiB of binary64): a large tile is done in bands of rows, so the kernels' memory holds w and one band. */
const BAND_CELLS = 1 << 17;

/**
 * out[0, m n) = l w + center, as lowRank (`l` m x r, `w` r x n, row-major;
 * r >= 1), by the kernel: false when the kernel is not to be had (the
 * caller computes).
 */
export function lowRankKernel(l: Float64Array, w: Float64Array, m: number, n: number, r: number, center: number, out: Float64Array): boolean {
  const cells = m * n;
  if (l.length < m * r || w.length < r * n || out.length < cells) return false;
  const k = kernels();
  if (k === null) return false;
  const rows = Math.max(1, Math.min(m, Math.floor(BAND_CELLS / n)));
  // From SCRATCH_AT, in binary64: w, then a band's rows of l and of out.
  const wAt = SCRATCH_AT / 8;
  const lAt = wAt + r * n;
  const outAt = lAt + rows * r;
  if (!k.lease(8 * (outAt + rows * n) - SCRATCH_AT)) return false;
  try {
    const fn = k.module<LowRankKernel>(LINALG_KERNELS);
    if (fn === null) return false;
    const heap = k.f64;
    heap.set(w.subarray(0, r * n), wAt);
    for (let i = 0; i < m; i += rows) {
      const band = Math.min(rows, m - i);
      heap.set(l.subarray(i * r, (i + band) * r), lAt);
      fn.lowRank(8 * lAt, 8 * wAt, band, n, r, center, 8 * outAt);
      out.set(heap.subarray(outAt, outAt + band * n), i * n);
    }
    return true;
  } finally {
    k.release();
  }
}
