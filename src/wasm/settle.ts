/**
 * The pointwise encoder's check of a candidate in the WebAssembly kernels
 * (kernels/settle.ts, in the encoder's module): the same codes, exceptions
 * and sums as the JavaScript in src/codec/settle.ts (settleCodes over
 * the low-rank part of lowRank and addLayer), band by band of rows, so that
 * neither the product nor the tile's values leave the cache between its
 * steps. bench/kernels.ts, "candidate check" (two runs on a shared host):
 * 2.5x the JavaScript's speed on a 61 x 87 tile, 3.6-4.2x on 256 x 256;
 * correct() on a 1024 x 1024 tile of bench/'s large field at rank 4 took
 * 4.5-4.7 ns a cell against 10.2-11.9 before (scratch measurement, three
 * alternating runs).
 */
import { ENCODE_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The exports of kernels/encode.ts: addresses are byte offsets into the kernels' memory. */
interface EncodeKernels {
  settleBand(l: number, w: number, r: number, n: number, rows: number, i0: number, center: number, layer: number, orig: number, f32: number, codes: number, step: number, e: number, q: number, exc: number, state: number, row: number): number;
}

/**
 * Cells a kernel call takes at most (a band of rows): its values, codes
 * and class codes, some 1.3 MiB with an f64 tile and a field layer, stay in
 * a core's second-level cache (common practice, no source, for the size).
 */
const BAND_CELLS = 1 << 16;

/** What a check gives besides the codes and exceptions (see settleCodes). */
export interface Settled {
  /** Whether a code is not 0. */
  any: boolean;
  /** The rough bits of the codes. */
  bits: number;
  /** False when the predictor sums are not to be used (an edge difference passed the limit). */
  sumsOk: boolean;
  /**
   * Where the kernel counted them: the non-zero differences of the five
   * predictors (entries 0-4, as the sums; NaN without sumsOk) and the
   * non-zero codes (entry 5); null otherwise.
   */
  nonzero: Float64Array | null;
}

/** A candidate's inputs: its factors (`l` m x r, `w` r x n, row-major), centre, the field layer's term (or null), the tile's values and class codes (null: every cell valid). */
export interface SettleInput {
  l: Float64Array;
  w: Float64Array;
  m: number;
  n: number;
  r: number;
  center: number;
  layer: Float64Array | null;
  orig: Float32Array | Float64Array;
  codes: Uint8Array | null;
}

/** A multiple of 16 at least `bytes`. */
function up16(bytes: number): number {
  return Math.ceil(bytes / 16) * 16;
}

/**
 * The check of a candidate at step `step` against bound e by the kernels:
 * q (m n codes, missing cells 0) and `exceptions` (pushed, in increasing
 * order) filled, and with `sums` (a tile without missing cells) the five
 * predictors' sums and flags added as predictorBitsRow adds them; null when
 * the kernels are not to be had (nothing is written: the caller computes).
 */
export function settleKernel(x: SettleInput, step: number, e: number, limit: number, q: Int32Array, exceptions: number[], sums: Float64Array | null): Settled | null {
  const { l, w, m, n, r, layer, orig, codes } = x;
  const cells = m * n;
  // The kernel's code limit is the format's (2^30); the fallback takes the same.
  if (limit !== 0x40000000 || n === 0 || l.length < m * r || w.length < r * n || q.length < cells || orig.length < cells) return null;
  if ((layer !== null && layer.length < cells) || (codes !== null && codes.length < cells)) return null;
  const k = kernels();
  if (k === null) return null;
  const rows = Math.max(1, Math.min(m, Math.floor(BAND_CELLS / n)));
  const band = rows * n;
  const f32 = orig instanceof Float32Array;
  const width = f32 ? 4 : 8;
  // Byte addresses from SCRATCH_AT: the state, w, a band of l, a row of scratch, then a band of the layer's
  // term, values, class codes, codes (after the row above) and exceptions; past each row's end the kernel's
  // last four cells read and write up to three cells more, hence the padding.
  const stateAt = SCRATCH_AT;
  const wAt = stateAt + 128;
  const lAt = up16(wAt + 8 * r * n);
  const rowAt = up16(lAt + 8 * rows * r);
  const layerAt = up16(rowAt + 8 * (n + 4));
  const origAt = up16(layerAt + (layer !== null ? 8 * band : 0));
  const codesAt = up16(origAt + width * band + 32);
  const aboveAt = up16(codesAt + (codes !== null ? band + 16 : 0));
  const qAt = aboveAt + 4 * n;
  const excAt = up16(qAt + 4 * band + 16);
  if (!k.lease(excAt + 4 * band - SCRATCH_AT)) return null;
  try {
    const fn = k.module<EncodeKernels>(ENCODE_KERNELS);
    if (fn === null) return null;
    const heap = k.f64;
    const i32 = k.i32;
    const u8 = k.u8;
    const values = f32 ? new Float32Array(heap.buffer) : heap;
    // The state (kernels/settle.ts): binary64 sums at 0, bits at 40, i32 flags at 48-60, binary64 counts at 64-104.
    heap.fill(0, stateAt / 8, stateAt / 8 + 16);
    i32[stateAt / 4 + 13] = sums !== null ? 1 : 0;
    heap.set(w.subarray(0, r * n), wAt / 8);
    for (let i = 0; i < m; i += rows) {
      const count = Math.min(rows, m - i);
      const from = i * n;
      const to = from + count * n;
      heap.set(l.subarray(i * r, (i + count) * r), lAt / 8);
      if (layer !== null) heap.set(layer.subarray(from, to), layerAt / 8);
      values.set(orig.subarray(from, to), origAt / width);
      if (codes !== null) u8.set(codes.subarray(from, to), codesAt);
      const failed = fn.settleBand(lAt, wAt, r, n, count, i, x.center, layer !== null ? layerAt : 0, origAt, f32 ? 1 : 0, codes !== null ? codesAt : 0, step, e, qAt, excAt, stateAt, rowAt);
      q.set(i32.subarray(qAt / 4, qAt / 4 + count * n), from);
      for (let c = 0; c < failed; c++) exceptions.push(i32[excAt / 4 + c]);
    }
    const sumsOk = sums !== null && i32[stateAt / 4 + 13] !== 0;
    if (sums !== null) {
      for (let s = 0; s < 5; s++) sums[s] += heap[stateAt / 8 + s];
      sums[5] = sums[5] | i32[stateAt / 4 + 12];
    }
    const nonzero = heap.slice(stateAt / 8 + 8, stateAt / 8 + 14);
    if (!sumsOk) nonzero.fill(Number.NaN, 0, 5);
    return { any: i32[stateAt / 4 + 15] !== 0, bits: heap[stateAt / 8 + 5], sumsOk, nonzero };
  } finally {
    k.release();
  }
}
