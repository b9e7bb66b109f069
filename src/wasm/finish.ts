/**
 * The encoder's finishing kernels (kernels/finish.ts, the module
 * FINISH_KERNELS): the blend predictor's walk over known codes, as
 * predict() and predictedFill() in src/codec/reconstruct.ts take it (four
 * cells at a time for small codes without a class map: kernels/blend-small.ts,
 * the module FINISH_BLEND_KERNELS), the
 * plain predictors' differences, as predict() forms them;
 * (kernels/finish-ints.ts, the module FINISH_INTS_KERNELS) the binary
 * coder's encoder, as encodeIntsWithin in src/codec/code-encode.ts; and
 * (kernels/finish-symbols.ts, the module
 * FINISH_SYMBOL_KERNELS) the symbol coder's encoder, as encodeSymbolsWithin
 * in src/codec/code-symbols-encode.ts, with the error tally of the
 * encoder's check of a finished tile (src/codec/measure.ts), which call
 * these first. The same codes and the
 * same bytes as the JavaScript; null (or undefined) where the kernels are
 * not to be had, and the caller runs the JavaScript.
 */
import { FINISH_BLEND_KERNELS, FINISH_INTS_KERNELS, FINISH_KERNELS, FINISH_SYMBOL_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT, WEIGHTS_BYTES } from './kernels.js';

/** The exports of kernels/finish.ts: addresses are byte offsets into the kernels' memory. */
interface FinishKernels {
  predictPlain(q: number, d: number, m: number, n: number, kind: number): number;
  blendEncode(q: number, d: number, m: number, n: number, limit: number, check: number, weight: number, above: number, below: number, codes: number, nums: number, totals: number, errs: number): number;
}

/** The exports of kernels/finish-ints.ts. */
interface IntsEncoder {
  encodeInts(values: number, m: number, n: number, codes: number, model: number, out: number, cap: number, atMost: number): number;
  written: WebAssembly.Global;
}

/** The export of kernels/finish-blend.ts. */
interface BlendSmall {
  blendEncodeSmall(q: number, d: number, m: number, n: number, limit: number, weight: number, scratch: number): number;
}

/** The largest limit the blend kernel takes (it holds the limit in an i32; the encoder passes 2^30). */
const MAX_LIMIT = 0x7fffffff;

/**
 * The encoder's blend walk over the m x n codes `q` (left as they are):
 * each cell's prediction p from the cells before it, its difference v - p
 * into `d` (when given), where v is its code, or for a cell whose class in
 * `codes` is not Valid (0) its prediction (0 beyond +-limit), and the codes
 * so filled into `filled` (when given). With `check`, a difference beyond
 * +-limit stops the walk: false (d and filled then unspecified). True when
 * every cell is walked; null when the kernel is not to be had. `weights` is
 * the blend weight table.
 */
export function blendEncodeKernel(q: Int32Array, codes: Uint8Array | null, m: number, n: number, limit: number, check: boolean, weights: Int32Array, d: Int32Array | null, filled: Int32Array | null): boolean | null {
  if (!(limit >= 0 && limit <= MAX_LIMIT)) return null;
  const k = kernels();
  if (k === null) return null;
  const cells = m * n;
  // From SCRATCH_AT, in i32: q, d, the two rows of activity sums (5 n each), then the class map (u8).
  const qAt = SCRATCH_AT / 4;
  const dAt = qAt + cells;
  const aboveAt = dAt + cells;
  const belowAt = aboveAt + 5 * n;
  // Then, in bytes: a row's weighted sums (binary64, 8-byte aligned), totals (i32) and errors (5 n i32 after 5 more), and the class map.
  const numsAt = 8 * Math.ceil((belowAt + 5 * n) / 2);
  const totalsAt = numsAt + 8 * n;
  const errsAt = totalsAt + 4 * n + 20;
  const codesAt = errsAt + 20 * n;
  // Without a class map, the four-at-a-time walk's scratch (25 rows of n + 8 i32) where the class map would be.
  const end = codes === null ? codesAt + 100 * (n + 8) : codesAt + cells;
  if (!k.lease(end - SCRATCH_AT)) return null;
  try {
    const fn = k.module<FinishKernels>(FINISH_KERNELS);
    if (fn === null) return null;
    const heap = k.i32;
    if (!k.weightsLoaded) {
      if (4 * weights.length > WEIGHTS_BYTES) return null;
      heap.set(weights, 0);
      k.weightsLoaded = true;
    }
    heap.set(q.subarray(0, cells), qAt);
    if (codes === null) {
      // Small codes (within 2^28) take the four-at-a-time walk (2: they are not, walk below).
      const small = k.module<BlendSmall>(FINISH_BLEND_KERNELS);
      const status = small === null ? 2 : small.blendEncodeSmall(4 * qAt, 4 * dAt, m, n, limit, 0, codesAt);
      if (status !== 2) {
        if (status === 1 && d !== null) d.set(heap.subarray(dAt, dAt + cells));
        if (status === 1 && filled !== null) filled.set(q.subarray(0, cells));
        return status === 1;
      }
    } else k.u8.set(codes.subarray(0, cells), codesAt);
    const ok = fn.blendEncode(4 * qAt, 4 * dAt, m, n, limit, check ? 1 : 0, 0, 4 * aboveAt, 4 * belowAt, codes === null ? 0 : codesAt, numsAt, totalsAt, errsAt) !== 0;
    if (ok && d !== null) d.set(heap.subarray(dAt, dAt + cells));
    if (ok && filled !== null) filled.set(heap.subarray(qAt, qAt + cells));
    return ok;
  } finally {
    k.release();
  }
}

/**
 * predict(q, m, n, limit, kind) with a plain predictor (kind 1 to 5:
 * Lorenzo, Left, Up, Average, Median) and a limit of at least 2^30, by
 * the kernel, into `d`: true when done, false when the JavaScript is to do
 * it (no kernel, or a code beyond 2^28 in magnitude, where the kernel's
 * 32-bit sums could wrap or a difference pass the limit).
 */
export function predictPlainKernel(q: Int32Array, d: Int32Array, m: number, n: number, kind: number): boolean {
  if (!(kind >= 1 && kind <= 5)) return false;
  const k = kernels();
  if (k === null) return false;
  const cells = m * n;
  // From SCRATCH_AT, in i32: q, then d.
  const qAt = SCRATCH_AT / 4;
  const dAt = qAt + cells;
  if (!k.lease(8 * cells)) return false;
  try {
    const fn = k.module<FinishKernels>(FINISH_KERNELS);
    if (fn === null) return false;
    const heap = k.i32;
    heap.set(q.subarray(0, cells), qAt);
    if (fn.predictPlain(4 * qAt, 4 * dAt, m, n, kind) === 0) return false;
    d.set(heap.subarray(dAt, dAt + cells));
    return true;
  } finally {
    k.release();
  }
}

/** Contexts of the binary coder's model (CONTEXTS in src/codec/code-model.ts), a u32 each in kernels/ints-encode.ts. */
const CONTEXTS = 614;

/**
 * encodeIntsWithin(values, m, n, codes, atMost) by the kernel: the stream,
 * or null once it is longer than `atMost` bytes; undefined when the
 * JavaScript is to code it (no kernel, or a case the kernel leaves to it:
 * a skipped cell holding a value, a value beyond 2^30, a stream longer than
 * four bytes a value).
 */
export function encodeIntsKernel(values: Int32Array, m: number, n: number, codes: Uint8Array | null, atMost: number): Uint8Array | null | undefined {
  const k = kernels();
  if (k === null) return undefined;
  const cells = m * n;
  // Bytes from SCRATCH_AT: values (i32), the model (u32 a context), the class map, the stream.
  const cap = 4 * cells + 64;
  const valuesAt = SCRATCH_AT;
  const modelAt = valuesAt + 4 * cells;
  const codesAt = modelAt + 4 * CONTEXTS;
  const outAt = codesAt + (codes === null ? 0 : cells);
  if (!k.lease(outAt + cap - SCRATCH_AT)) return undefined;
  try {
    const fn = k.module<IntsEncoder>(FINISH_INTS_KERNELS);
    if (fn === null) return undefined;
    k.i32.set(values.subarray(0, cells), valuesAt / 4);
    if (codes !== null) k.u8.set(codes.subarray(0, cells), codesAt);
    const status = fn.encodeInts(valuesAt, m, n, codes === null ? 0 : codesAt, modelAt, outAt, cap, atMost);
    if (status === 1) return null;
    if (status !== 0) return undefined;
    const length = fn.written.value as number;
    return k.u8.slice(outAt, outAt + length);
  } finally {
    k.release();
  }
}

/** The exports of kernels/finish-symbols.ts: addresses are byte offsets into the kernels' memory. */
interface SymbolEncoder {
  tallyCells(orig: number, out: number, codes: number, cells: number, f32: number, state: number): void;
  encodeSymbols(values: number, m: number, n: number, codes: number, md: number, out: number, cap: number, raw: number, rawCap: number, atMost: number): number;
  written: WebAssembly.Global;
  rawWritten: WebAssembly.Global;
}

/**
 * The two parts of encodeSymbolsWithin(values, m, n, codes, atMost) by the
 * kernel, the range stream and the raw bits (the caller frames them), or
 * null once they are longer than `atMost` bytes with the least length
 * word; undefined when the JavaScript is to code it (no kernel, or a case
 * the kernel leaves to it: a skipped cell holding a value, a value beyond
 * 2^30, a part longer than two bytes a value). `image` is a fresh symbol
 * model in the kernels' layout (symbolKernelImage in
 * src/codec/code-symbols.ts).
 */
export function encodeSymbolsKernel(values: Int32Array, m: number, n: number, codes: Uint8Array | null, atMost: number, image: Uint8Array): { range: Uint8Array; raw: Uint8Array } | null | undefined {
  const k = kernels();
  if (k === null) return undefined;
  const cells = m * n;
  // Bytes from SCRATCH_AT: values (i32), the model, the class map, the range stream, the raw bits.
  const cap = 2 * cells + 64;
  const valuesAt = SCRATCH_AT;
  const modelAt = valuesAt + 4 * cells;
  const codesAt = modelAt + 4 * Math.ceil(image.length / 4);
  const outAt = codesAt + (codes === null ? 0 : cells);
  const rawAt = outAt + cap;
  if (!k.lease(rawAt + cap - SCRATCH_AT)) return undefined;
  try {
    const fn = k.module<SymbolEncoder>(FINISH_SYMBOL_KERNELS);
    if (fn === null) return undefined;
    k.i32.set(values.subarray(0, cells), valuesAt / 4);
    const heap = k.u8;
    heap.set(image, modelAt);
    if (codes !== null) heap.set(codes.subarray(0, cells), codesAt);
    const status = fn.encodeSymbols(valuesAt, m, n, codes === null ? 0 : codesAt, modelAt, outAt, cap, rawAt, cap, atMost);
    if (status === 1) return null;
    if (status !== 0) return undefined;
    const length = fn.written.value as number;
    const rawLength = fn.rawWritten.value as number;
    return { range: heap.slice(outAt, outAt + length), raw: heap.slice(rawAt, rawAt + rawLength) };
  } finally {
    k.release();
  }
}

/**
 * The state ([count, max, scale, ssq], ErrorTally.state) of a fresh
 * ErrorTally after add(|orig[c] - out[c]|) for every cell c whose class in
 * `codes` is Valid (0), in cell order, by the kernel (kernels/tally.ts):
 * the same state to the bit; null when the kernel is not to be had.
 * `orig` and `out` are of one kind, with at least codes.length values.
 */
export function tallyKernel(orig: Float32Array | Float64Array, out: Float32Array | Float64Array, codes: Uint8Array): [number, number, number, number] | null {
  const k = kernels();
  if (k === null) return null;
  const cells = codes.length;
  const f32 = orig instanceof Float32Array;
  const width = f32 ? 4 : 8;
  // Bytes from SCRATCH_AT: the state (four binary64), orig, out, the class map.
  const stateAt = SCRATCH_AT;
  const origAt = stateAt + 32;
  const outAt = origAt + width * cells;
  const codesAt = outAt + width * cells;
  if (!k.lease(codesAt + cells - SCRATCH_AT)) return null;
  try {
    const fn = k.module<SymbolEncoder>(FINISH_SYMBOL_KERNELS);
    if (fn === null) return null;
    const view = f32 ? new Float32Array(k.u8.buffer) : k.f64;
    view.set(orig.subarray(0, cells), origAt / width);
    view.set(out.subarray(0, cells), outAt / width);
    k.u8.set(codes, codesAt);
    const state = k.f64;
    state.set([0, 0, 0, 1], stateAt / 8);
    fn.tallyCells(origAt, outAt, codesAt, cells, f32 ? 1 : 0, stateAt);
    return [state[stateAt / 8], state[stateAt / 8 + 1], state[stateAt / 8 + 2], state[stateAt / 8 + 3]];
  } finally {
    k.release();
  }
}
