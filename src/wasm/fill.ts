/**
 * The harmonic fill's sweeps (src/codec/fill.ts, fillMissing) in the
 * WebAssembly kernels (kernels/fill.ts, in the module MASKED_KERNELS,
 * encoder-side only): the same values bit for bit. False where the
 * kernels are not to be had (nothing is written: the caller sweeps).
 */
import { MASKED_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The export of kernels/fill.ts: addresses are byte offsets into the kernels' memory. */
interface FillKernels {
  fillSweeps(x: number, missing: number, inner: number, count: number, m: number, n: number, sweeps: number): void;
}

/** Up to `sweeps` Gauss-Seidel sweeps over the missing cells `missing` (with `inner`, see fillMissing) of x (m x n, in place). */
export function fillSweepsKernel(x: Float64Array, missing: Int32Array, inner: Uint8Array, m: number, n: number, sweeps: number): boolean {
  const cells = m * n;
  const count = missing.length;
  if (cells === 0 || x.length < cells || inner.length < count) return false;
  const k = kernels();
  if (k === null) return false;
  // Byte addresses from SCRATCH_AT: x, the missing cells' numbers, their inner flags.
  const xAt = SCRATCH_AT;
  const missingAt = xAt + 8 * cells;
  const innerAt = missingAt + 4 * count;
  if (!k.lease(innerAt + count - SCRATCH_AT)) return false;
  try {
    const fn = k.module<FillKernels>(MASKED_KERNELS);
    if (fn === null) return false;
    k.f64.set(x.subarray(0, cells), xAt / 8);
    k.i32.set(missing, missingAt / 4);
    k.u8.set(inner, innerAt);
    fn.fillSweeps(xAt, missingAt, innerAt, count, m, n, sweeps);
    x.set(k.f64.subarray(xAt / 8, xAt / 8 + cells));
    return true;
  } finally {
    k.release();
  }
}
