/**
 * The blend predictor's decoding walk in the WebAssembly kernel
 * (kernels/blend.ts): the same codes, and the same stop, as blendWalk in
 * src/codec/reconstruct.ts with no settle function, which calls this first.
 */
import { DECODE_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT, WEIGHTS_BYTES } from './kernels.js';

/** The blend walk of kernels/decode.ts: addresses are byte offsets into the kernels' memory. */
interface BlendKernel {
  blendDecode(q: number, m: number, n: number, limit: number, weight: number, work: number): number;
}

/** The largest limit the kernel takes (it holds the limit in an i32; the decoder passes 2^30). */
const MAX_LIMIT = 0x7fffffff;

/**
 * Decode the m x n differences `q` in place with the blend predictor (q[c]
 * + p in raster order, stopping at a code beyond +-limit), by the kernel:
 * true when every cell decoded, false when a code stopped the walk (q then
 * as the JavaScript leaves it: the cells before that one decoded, that one
 * and the rest untouched), null when the kernel is not to be had (the
 * caller then walks in JavaScript). `weights` is the blend weight table.
 */
export function blendDecodeKernel(q: Int32Array, m: number, n: number, limit: number, weights: Int32Array): boolean | null {
  if (!(limit >= 0 && limit <= MAX_LIMIT)) return null;
  const k = kernels();
  if (k === null) return null;
  const cells = m * n;
  // From SCRATCH_AT, in i32: q, then the kernel's work (the row above's activity sums and the row's errors, 10 n + 18).
  const qAt = SCRATCH_AT / 4;
  const workAt = qAt + cells;
  if (!k.lease(4 * (workAt + 10 * n + 18) - SCRATCH_AT)) return null;
  try {
    const fn = k.module<BlendKernel>(DECODE_KERNELS);
    if (fn === null) return null;
    const heap = k.i32;
    if (!k.weightsLoaded) {
      if (4 * weights.length > WEIGHTS_BYTES) return null;
      heap.set(weights, 0);
      k.weightsLoaded = true;
    }
    heap.set(q, qAt);
    const ok = fn.blendDecode(4 * qAt, m, n, limit, 0, 4 * workAt) !== 0;
    q.set(heap.subarray(qAt, qAt + cells));
    return ok;
  } finally {
    k.release();
  }
}
