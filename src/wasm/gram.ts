/**
 * The Gram matrix of src/linalg/spectrum.ts (gram: a^T a of a tall matrix,
 * a a^T of a wide one) in the WebAssembly kernels (kernels/gram.ts, the
 * module GRAM_KERNELS, encoder-side only): the same matrix bit for bit, two
 * entries a vector; and with it, in the same memory, its Householder
 * reduction to tridiagonal form (tridiagonalize in spectrum.ts;
 * kernels/tridiag.ts). Null or false where the kernels are not to be had
 * (the caller computes).
 */
import { GRAM_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The exports of kernels/gram.ts: addresses are byte offsets into the kernels' memory. */
interface GramKernels {
  gramTall(a: number, m: number, n: number, g: number): void;
  gramWide(a: number, m: number, n: number, t: number, g: number): void;
  tridiagonalize(g: number, k: number, d: number, sub: number, work: number): void;
}

/** The k x k Gram matrix of the row-major m x n `a` (k = min(m, n)), as gram() in src/linalg/spectrum.ts forms it; null without the kernels (the encoder takes {@link gramTridiagonalKernel}; this one is the Gram matrix alone, for tests). */
export function gramKernel(a: Float64Array, m: number, n: number): Float64Array | null {
  const cells = m * n;
  if (cells === 0 || a.length < cells) return null;
  const k = kernels();
  if (k === null) return null;
  const side = Math.min(m, n);
  // From SCRATCH_AT (16-byte aligned): a, then g, then (wide) a transposed.
  const aAt = SCRATCH_AT;
  const gAt = aAt + 8 * cells + 16;
  const tAt = gAt + 8 * side * side + 16;
  if (!k.lease(tAt + (m < n ? 8 * cells : 0) - SCRATCH_AT)) return null;
  try {
    const fn = k.module<GramKernels>(GRAM_KERNELS);
    if (fn === null) return null;
    k.f64.set(a.subarray(0, cells), aAt / 8);
    if (m >= n) fn.gramTall(aAt, m, n, gAt);
    else fn.gramWide(aAt, m, n, tAt, gAt);
    return k.f64.slice(gAt / 8, gAt / 8 + side * side);
  } finally {
    k.release();
  }
}

/**
 * tridiagonalize(gram(a, m, n), k, d, sub) of src/linalg/spectrum.ts (k =
 * min(m, n)): the diagonal into d and the subdiagonal into sub, the Gram
 * matrix never leaving the kernels' memory; false without the kernels.
 */
export function gramTridiagonalKernel(a: Float64Array, m: number, n: number, d: Float64Array, sub: Float64Array): boolean {
  const cells = m * n;
  const side = Math.min(m, n);
  if (cells === 0 || a.length < cells || d.length < side || sub.length < side) return false;
  const k = kernels();
  if (k === null) return false;
  // From SCRATCH_AT (16-byte aligned): a, g, d, sub, five vectors of scratch, then (wide) a transposed.
  const aAt = SCRATCH_AT;
  const gAt = aAt + 8 * cells + 16;
  const dAt = gAt + 8 * side * side + 16;
  const subAt = dAt + 8 * side + 16;
  const workAt = subAt + 8 * side + 16;
  const tAt = workAt + 40 * side + 16;
  if (!k.lease(tAt + (m < n ? 8 * cells : 0) - SCRATCH_AT)) return false;
  try {
    const fn = k.module<GramKernels>(GRAM_KERNELS);
    if (fn === null) return false;
    k.f64.set(a.subarray(0, cells), aAt / 8);
    if (m >= n) fn.gramTall(aAt, m, n, gAt);
    else fn.gramWide(aAt, m, n, tAt, gAt);
    fn.tridiagonalize(gAt, side, dAt, subAt, workAt);
    d.set(k.f64.subarray(dAt / 8, dAt / 8 + side));
    sub.set(k.f64.subarray(subAt / 8, subAt / 8 + side));
    return true;
  } finally {
    k.release();
  }
}
