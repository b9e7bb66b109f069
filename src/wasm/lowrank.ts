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
  // From SCRATCH_AT, in binary64: l, w, out.
  const lAt = SCRATCH_AT / 8;
  const wAt = lAt + m * r;
  const outAt = wAt + r * n;
  if (!k.lease(8 * (outAt + cells) - SCRATCH_AT)) return false;
  try {
    const fn = k.module<LowRankKernel>(LINALG_KERNELS);
    if (fn === null) return false;
    const heap = k.f64;
    heap.set(l.subarray(0, m * r), lAt);
    heap.set(w.subarray(0, r * n), wAt);
    fn.lowRank(8 * lAt, 8 * wAt, m, n, r, center, 8 * outAt);
    out.set(heap.subarray(outAt, outAt + cells));
    return true;
  } finally {
    k.release();
  }
}
