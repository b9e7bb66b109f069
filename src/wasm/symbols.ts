/**
 * The symbol coder's decoder in the WebAssembly kernel (kernels/symbols.ts,
 * the module SYMBOL_KERNELS): the same values as decodeSymbols in
 * src/codec/code-symbols.ts, which calls this after reading the stream's
 * framing and first four bytes, and which turns what the kernel reports
 * into the same refusals as its JavaScript loop.
 */
import { SYMBOL_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT } from './kernels.js';

/** The kernel's exports: addresses are byte offsets into the kernels' memory. */
interface SymbolsKernel {
  decodeSymbols(range: number, end: number, code0: number, raw: number, rawLength: number, m: number, n: number, codes: number, out: number, model: number): number;
  finalPos: WebAssembly.Global;
  bitPos: WebAssembly.Global;
  failedAt: WebAssembly.Global;
  zeroAfterFlag: WebAssembly.Global;
}

/** The model's parts as kernels/symbols.ts lays them out (byte offsets; integers little-endian, as in WebAssembly memory). */
const F_AT = 0;
const E_AT = F_AT + 16 * 25 * 4;
const LEFT_AT = E_AT + 16 * 26 * 4;
const REBUILDS_AT = LEFT_AT + 16 * 4;
const LUT_AT = REBUILDS_AT + 16 * 4;
const P_AT = LUT_AT + 16 * 64;
const COUNT_AT = P_AT + 50 * 2;
const MODEL_BYTES = COUNT_AT + 56;
/** The kernel's own working memory after the model, for n columns and a range stream of rlen bytes (kernels/symbols.ts: the shifts by count, the row above's words, four zero bytes and the range stream reversed), rounded up to 4. */
const workBytes = (n: number, rlen: number): number => 256 + 4 * (n + 4) + 4 + 4 * Math.ceil(rlen / 4);

/** A fresh symbol model, as code-symbols.ts makes one: counts, tables, symbols left, rebuilds, lookup tables, binary probabilities and counts. */
export interface FreshSymbolModel {
  F: Int32Array;
  E: Int32Array;
  left: Int32Array;
  rebuilds: Uint8Array;
  lut: Uint8Array;
  p: Uint16Array;
  count: Uint8Array;
}

/** The image of `md` in the kernel's layout (null when its sizes are not the ones the kernel is written for); copied into memory at each use. */
export function symbolModelImage(md: FreshSymbolModel): Uint8Array | null {
  if (md.F.length !== 400 || md.E.length !== 416 || md.left.length !== 16 || md.rebuilds.length !== 16 || md.lut.length !== 1024 || md.p.length !== 50 || md.count.length !== 50) return null;
  const image = new Uint8Array(MODEL_BYTES);
  const v = new DataView(image.buffer);
  md.F.forEach((x, i) => v.setInt32(F_AT + 4 * i, x, true));
  md.E.forEach((x, i) => v.setInt32(E_AT + 4 * i, x, true));
  md.left.forEach((x, i) => v.setInt32(LEFT_AT + 4 * i, x, true));
  md.rebuilds.forEach((x, i) => v.setInt32(REBUILDS_AT + 4 * i, x, true));
  image.set(md.lut, LUT_AT);
  md.p.forEach((x, i) => v.setUint16(P_AT + 2 * i, x, true));
  image.set(md.count, COUNT_AT);
  return image;
}

/** What the kernel reports: as the result and globals of kernels/symbols.ts, and the raw section's byte at the bit position (0 past its end). */
export interface SymbolsEnd {
  status: number;
  failedAt: number;
  pos: number;
  bits: number;
  zeroAfterFlag: number;
  lastByte: number;
}

/** The largest stream and grid handed to the kernel: bit positions and cell numbers stay well inside an i32 (larger ones decode in JavaScript). */
const MAX_BYTES = 2 ** 27;
const MAX_CELLS = 2 ** 26;

/**
 * Decode the m x n grid whose range stream is `all[from, from + rlen)` and
 * raw bit section the rest of `all`, `code` its first four bytes, into
 * `out` (cells not Valid in `codes`, class 0 there, set to 0), by the
 * kernel; null when the kernel is not to be had (the caller decodes).
 * `image` is a fresh model from {@link symbolModelImage}.
 */
export function symbolsKernel(all: Uint8Array, from: number, rlen: number, code: number, m: number, n: number, codes: Uint8Array | null, out: Int32Array, image: Uint8Array): SymbolsEnd | null {
  const cells = m * n;
  if (all.length > MAX_BYTES || cells > MAX_CELLS || out.length < cells || (codes !== null && codes.length < cells)) return null;
  const k = kernels();
  if (k === null) return null;
  // Bytes from SCRATCH_AT: out (i32), the model and the kernel's working memory, the class map, the range stream, the raw section, four zero bytes.
  const outAt = SCRATCH_AT;
  const modelAt = outAt + 4 * cells;
  const codesAt = modelAt + MODEL_BYTES + workBytes(n, rlen);
  const rangeAt = codesAt + (codes === null ? 0 : cells);
  const rawAt = rangeAt + rlen;
  const rawLength = all.length - from - rlen;
  const zerosAt = rawAt + rawLength;
  if (!k.lease(zerosAt + 4 - SCRATCH_AT)) return null;
  try {
    const fn = k.module<SymbolsKernel>(SYMBOL_KERNELS);
    if (fn === null) return null;
    const heap = k.u8;
    heap.set(image, modelAt);
    if (codes !== null) heap.set(codes.subarray(0, cells), codesAt);
    heap.set(all.subarray(from), rangeAt);
    heap.fill(0, zerosAt, zerosAt + 4);
    const status = fn.decodeSymbols(rangeAt, rlen, code, rawAt, rawLength, m, n, codes === null ? 0 : codesAt, outAt, modelAt);
    out.set(k.i32.subarray(outAt / 4, outAt / 4 + cells));
    const bits = fn.bitPos.value as number;
    return {
      status,
      failedAt: fn.failedAt.value as number,
      pos: fn.finalPos.value as number,
      bits,
      zeroAfterFlag: fn.zeroAfterFlag.value as number,
      lastByte: bits >>> 3 < rawLength + 4 ? heap[rawAt + (bits >>> 3)] : 0,
    };
  } finally {
    k.release();
  }
}
