/**
 * The pointwise check's choice of predictor on a tile with missing cells
 * in the WebAssembly kernels (kernels/masked.ts, the module MASKED_KERNELS,
 * encoder-side only): the rough bits of each plain predictor's differences
 * of the codes filled as predictedFill fills them (src/codec/reconstruct.ts),
 * as correct() in src/codec/tile-encode.ts weighs them, without forming
 * the differences of the predictors it does not keep.
 */
import { MASKED_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The export of kernels/masked.ts: addresses are byte offsets into the kernels' memory. */
interface MaskedKernels {
  maskedBits(q: number, codes: number, work: number, m: number, n: number, out: number): void;
}

/**
 * roughBits(predict(predictedFill(q, codes, m, n, 2^30, kind), m, n, 2^30,
 * kind)) for kinds 1 to 5 (Lorenzo, Left, Up, Average, Median), entry
 * kind - 1; -1 where predict() gives null. Null where the kernels are not
 * to be had.
 */
export function maskedPredictorBits(q: Int32Array, codes: Uint8Array, m: number, n: number): Float64Array | null {
  const cells = m * n;
  if (cells === 0 || q.length < cells || codes.length < cells) return null;
  const k = kernels();
  if (k === null) return null;
  // Byte addresses from SCRATCH_AT: the five sums, q, the filled codes, the class codes.
  const outAt = SCRATCH_AT;
  const qAt = outAt + 48;
  const workAt = qAt + 4 * cells;
  const codesAt = workAt + 4 * cells;
  if (!k.lease(codesAt + cells - SCRATCH_AT)) return null;
  try {
    const fn = k.module<MaskedKernels>(MASKED_KERNELS);
    if (fn === null) return null;
    k.i32.set(q.subarray(0, cells), qAt / 4);
    k.u8.set(codes.subarray(0, cells), codesAt);
    fn.maskedBits(qAt, codesAt, workAt, m, n, outAt);
    return k.f64.slice(outAt / 8, outAt / 8 + 5);
  } finally {
    k.release();
  }
}
