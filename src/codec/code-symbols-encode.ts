/**
 * Encoder of the symbol coder for residual streams (spec/FORMAT.md 10.3.8),
 * with the model of ./code-symbols.ts and the range encoder of
 * ./code-encode.ts (a multi-symbol decision narrows its interval directly).
 */
import { RangeEncoder } from './code-encode.js';
import { bucketOf, signContext } from './code-model.js';
import { newBinary, newSymbolModel, rebuild, SYMBOL_LAYOUT, symbolKernelImage } from './code-symbols.js';
import { encodeSymbolsKernel } from '../wasm/finish.js';

const { SYMBOLS, ESCAPE, ESC_K, FLAG_BUCKETS, TOTAL_BITS, INC, ZERO_AT, SIGN_AT, ESC_AT, TOP_AT } = SYMBOL_LAYOUT;
import { Cell } from './mask.js';

/** Raw bits, most significant first, into bytes. */
class BitWriter {
  private out: Uint8Array;
  private length = 0;
  private acc = 0;
  private held = 0;
  constructor(expected: number) {
    this.out = new Uint8Array(Math.max(16, expected));
  }
  /** Whole bytes written so far. */
  get written(): number {
    return this.length;
  }
  /** The low `bits` bits of v (bits <= 29). */
  put(v: number, bits: number): void {
    for (let b = bits - 1; b >= 0; b--) {
      this.acc = (this.acc << 1) | ((v >>> b) & 1);
      if (++this.held === 8) {
        if (this.length === this.out.length) {
          const next = new Uint8Array(this.out.length * 2);
          next.set(this.out);
          this.out = next;
        }
        this.out[this.length++] = this.acc;
        this.acc = 0;
        this.held = 0;
      }
    }
  }
  finish(): Uint8Array {
    if (this.held > 0) this.put(0, 8 - this.held);
    return this.out.slice(0, this.length);
  }
}

/** Bytes of a `length` varint (LEB128, shortest form) of v. */
function lengthBytes(v: number): number {
  let k = 1;
  while (v >= 128) {
    v = Math.floor(v / 128);
    k++;
  }
  return k;
}

/**
 * Code an m x n grid of integers (|v| <= 2^30) in raster order with the
 * symbol coder. Cells whose class in `codes` is not Valid are skipped, as
 * in encodeInts (they must hold 0).
 */
export function encodeSymbols(values: Int32Array, m: number, n: number, codes: Uint8Array | null): Uint8Array {
  return encodeSymbolsWithin(values, m, n, codes, Infinity)!;
}

/**
 * {@link encodeSymbols}, or null once the result is known to be longer than
 * `atMost` bytes (checked after each row: its length varint, at least one
 * byte, and the bytes of both parts written so far only add up).
 */
export function encodeSymbolsWithin(values: Int32Array, m: number, n: number, codes: Uint8Array | null, atMost: number): Uint8Array | null {
  // The WebAssembly kernel where there is one (the same bytes; src/wasm/finish.ts), for the model it is written for.
  const image = Cell.Valid === 0 ? symbolKernelImage() : null;
  if (image !== null) {
    const parts = encodeSymbolsKernel(values, m, n, codes, atMost, image);
    if (parts === null) return null;
    if (parts !== undefined) return framed(parts.range, parts.raw);
  }
  const md = newSymbolModel();
  const { F, E, left } = md;
  const enc = new RangeEncoder(values.length / 2 + 64, newBinary());
  const raw = new BitWriter(values.length / 4 + 16);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const v = values[c];
      if (codes !== null && codes[c] !== Cell.Valid) {
        if (v !== 0) throw new Error(`internal: skipped cell ${c} holds ${v}, not 0`);
        continue;
      }
      const l = j > 0 ? values[c - 1] : 0;
      const u = i > 0 ? values[c - n] : 0;
      const b = bucketOf(l, u, i > 0 && j > 0 ? values[c - n - 1] : 0, i > 0 && j + 1 < n ? values[c - n + 1] : 0);
      if (b < FLAG_BUCKETS) {
        enc.bit(v === 0 ? 0 : 1, ZERO_AT + b);
        if (v === 0) continue;
      }
      const mag = v < 0 ? -v : v;
      if (mag > 0x40000000) throw new Error(`internal: value ${v} at cell ${c} exceeds 2^30`);
      const k = mag === 0 ? -1 : 31 - Math.clz32(mag);
      const top = k > 0 ? (mag >>> (k - 1)) & 1 : 0;
      const s = v === 0 ? 0 : k === 0 ? 1 : k < ESC_K ? 2 * k + top : ESCAPE;
      const eb = b * (SYMBOLS + 1);
      const r = enc.width >>> TOTAL_BITS;
      const lo = r * E[eb + s];
      enc.interval(lo, s === ESCAPE ? enc.width - lo : r * E[eb + s + 1] - lo);
      F[b * SYMBOLS + s] += INC;
      if (--left[b] === 0) rebuild(md, b);
      if (v === 0) continue;
      if (s === ESCAPE) {
        for (let e = ESC_K; e < k; e++) enc.bit(1, ESC_AT + e - ESC_K);
        if (k < 30) enc.bit(0, ESC_AT + k - ESC_K);
        enc.bit(top, TOP_AT + k - ESC_K);
      }
      enc.bit(v < 0 ? 1 : 0, SIGN_AT + signContext(l, u));
      if (k > 1) raw.put(mag, k - 1);
    }
    if (1 + enc.written + raw.written > atMost) return null;
  }
  return framed(enc.finish(), raw.finish());
}

/** The stream: the range stream's length as a `length` varint, the range stream, the raw bits. */
function framed(stream: Uint8Array, bits: Uint8Array): Uint8Array {
  const head = lengthBytes(stream.length);
  const out = new Uint8Array(head + stream.length + bits.length);
  let v = stream.length;
  for (let x = 0; x < head; x++) {
    out[x] = (v & 0x7f) | (x + 1 < head ? 0x80 : 0);
    v = Math.floor(v / 128);
  }
  out.set(stream, head);
  out.set(bits, head + stream.length);
  return out;
}
