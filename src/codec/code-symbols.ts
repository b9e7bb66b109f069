/**
 * The symbol coder for residual streams (spec/FORMAT.md 10.3.8): one
 * multi-symbol decision per value, coded by range coding (G. N. N. Martin,
 * "Range encoding", 1979) with adaptive frequency counts (I. H. Witten,
 * R. M. Neal and J. G. Cleary, "Arithmetic coding for data compression",
 * CACM 30(6), 1987), for the class of the value and the bit below its
 * leading one; the sign and a few rare decisions stay binary (the model of
 * ./code-model.ts); the other mantissa bits go raw to a bit section after
 * the range stream. On dense residuals it takes about one decision a value
 * where the binary coder of ./code-encode.ts takes four to eight.
 *
 * Stream: length(range stream) as a `length` varint, the range stream, then
 * the raw bits, most significant first, zero-padded to a byte.
 *
 * This module holds the model and the decoder (what a reader loads); the
 * encoder is ./code-symbols-encode.ts.
 */
import { CodeStreamError } from './code-decode.js';
import { PROB_BITS, PROB_HALF, PROB_ONE, SHIFTS } from './code-model.js';
import { symbolModelImage, symbolsKernel } from '../wasm/symbols.js';
import { Cell } from './mask.js';

/** Symbols: 0 zero, 1 |v| = 1, 2k + t for classes k = 1..11 (t the bit below the leading one), 24 escape (k >= 12). */
const SYMBOLS = 25;
const ESCAPE = SYMBOLS - 1;
/** First class coded through the escape. */
const ESC_K = 12;
/** Buckets below this code a binary zero flag first (their symbol never takes 0). */
const FLAG_BUCKETS = 4;
/** The cumulative table spans 2^15. */
const TOTAL_BITS = 15;
const TOTAL = 1 << TOTAL_BITS;
/** A coded symbol adds this to its count. */
const INC = 32;
/** Rebuilds after 8, 16, 32, 64, 128 symbols of a context, then every 256. */
const FIRST = 8;
const EVERY = 256;
/** Counts are halved at a rebuild when their total exceeds this. */
const LIMIT = 1 << 15;
const BUCKETS = 16;

/** Binary contexts: zero flag of buckets 0-3, sign (9), escape unary steps k = 12..29, top bit of k = 12..30. */
const ZERO_AT = 0;
const SIGN_AT = ZERO_AT + FLAG_BUCKETS;
const ESC_AT = SIGN_AT + 9;
const TOP_AT = ESC_AT + 30 - ESC_K;
export const SYMBOL_BINARY_CONTEXTS = TOP_AT + 31 - ESC_K;

/**
 * The model's layout for the encoder (./code-symbols-encode.ts). The
 * decoder reads the module's own constants: exported bindings are read
 * through a cell in V8, which cost the decoder about a tenth of its time.
 */
export const SYMBOL_LAYOUT = { SYMBOLS, ESCAPE, ESC_K, FLAG_BUCKETS, TOTAL_BITS, INC, ZERO_AT, SIGN_AT, ESC_AT, TOP_AT } as const;

/** Starting counts per bucket (rows) and symbol (columns): spec/FORMAT.md 10.3.8, the same table. */
export const PRIOR: readonly number[] = [
  0, 33, 10, 8, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1,
  0, 33, 10, 8, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1,
  0, 33, 10, 8, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1,
  0, 52, 16, 12, 8, 6, 5, 4, 3, 2, 2, 2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1,
  13, 24, 28, 21, 14, 11, 8, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1,
  7, 12, 14, 11, 26, 20, 14, 11, 7, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1, 1, 1, 1, 1, 1, 1,
  4, 6, 7, 6, 13, 10, 26, 20, 13, 10, 7, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1, 1, 1, 1, 1,
  2, 4, 4, 3, 7, 6, 13, 10, 26, 20, 13, 10, 7, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1, 1, 1,
  2, 2, 3, 2, 4, 3, 7, 6, 13, 10, 26, 19, 13, 10, 7, 6, 4, 3, 3, 2, 2, 2, 1, 1, 1,
  1, 2, 2, 2, 3, 2, 4, 3, 7, 6, 13, 10, 26, 19, 13, 10, 7, 6, 4, 3, 3, 2, 2, 2, 2,
  1, 1, 1, 1, 2, 2, 3, 2, 4, 3, 7, 6, 13, 10, 26, 20, 13, 10, 7, 6, 4, 3, 3, 2, 2,
  1, 1, 1, 1, 1, 1, 2, 2, 3, 2, 4, 3, 7, 6, 13, 10, 26, 20, 13, 10, 7, 6, 4, 3, 4,
  1, 1, 1, 1, 1, 1, 1, 1, 2, 2, 3, 2, 4, 3, 7, 6, 14, 11, 26, 20, 14, 11, 7, 6, 7,
  1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 2, 2, 3, 2, 4, 3, 8, 6, 14, 11, 28, 21, 14, 11, 13,
  1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 2, 2, 3, 2, 5, 4, 8, 6, 16, 12, 30, 23, 27,
  1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 2, 1, 2, 2, 3, 3, 6, 4, 10, 8, 19, 15, 65,
];

/** Counts F (16 x 25), cumulative tables E (16 x 26), symbols left before each context's next rebuild, rebuilds so far. */
export interface SymbolModel {
  F: Int32Array;
  E: Int32Array;
  left: Int32Array;
  rebuilds: Uint8Array;
}

/** Rebuild context b's cumulative table from its counts (every symbol keeps at least 1 of 2^15), halve large counts, schedule the next. */
export function rebuild(md: SymbolModel, b: number): void {
  const { F, E } = md;
  const fb = b * SYMBOLS;
  const eb = b * (SYMBOLS + 1);
  let total = 0;
  for (let s = 0; s < SYMBOLS; s++) total += F[fb + s];
  let cum = 0;
  // cum < 2^16 and TOTAL - SYMBOLS < 2^15: the product stays below 2^31.
  for (let s = 0; s < SYMBOLS; s++) {
    E[eb + s] = s + Math.floor((cum * (TOTAL - SYMBOLS)) / total);
    cum += F[fb + s];
  }
  E[eb + SYMBOLS] = TOTAL;
  if (total > LIMIT) for (let s = 0; s < SYMBOLS; s++) F[fb + s] = (F[fb + s] + 1) >> 1;
  const k = md.rebuilds[b];
  if (k < 5) md.rebuilds[b] = k + 1;
  md.left[b] = Math.min(EVERY, FIRST << md.rebuilds[b]);
}

/** A fresh model: counts from {@link PRIOR}, tables built from them, first rebuild after 8 symbols. */
export function newSymbolModel(): SymbolModel {
  const md: SymbolModel = { F: Int32Array.from(PRIOR), E: new Int32Array(BUCKETS * (SYMBOLS + 1)), left: new Int32Array(BUCKETS), rebuilds: new Uint8Array(BUCKETS) };
  for (let b = 0; b < BUCKETS; b++) {
    rebuild(md, b);
    md.rebuilds[b] = 0;
    md.left[b] = FIRST;
  }
  return md;
}

/** Fresh binary contexts of the symbol coder: every probability 1/2, every count 0. */
export function newBinary(): { p: Uint16Array; count: Uint8Array } {
  return { p: new Uint16Array(SYMBOL_BINARY_CONTEXTS).fill(PROB_HALF), count: new Uint8Array(SYMBOL_BINARY_CONTEXTS) };
}

const TOP = 0x1000000;

/**
 * The decoder's lookup table of bucket b: entry u is the first symbol whose
 * interval may hold t = floor(code / r) with t >> 9 = u (a module function,
 * not a closure: V8 specialises a call site on its target, and a closure
 * made per stream is a new target each time).
 */
function fillLut(lut: Uint8Array, E: Int32Array, b: number): void {
  const eb = b * (SYMBOLS + 1);
  let s = 0;
  for (let u = 0; u < 64; u++) {
    while (s < ESCAPE && E[eb + s + 1] <= u << 9) s++;
    lut[b * 64 + u] = s;
  }
}

/**
 * Decode an m x n grid coded by {@link encodeSymbols} into `out`; cells
 * whose class in `codes` is not Valid are set to 0. Throws
 * {@link CodeStreamError} for a stream that is not exactly `bytes.length`
 * long (range stream or raw section), a value beyond 2^30, or a symbol no
 * encoder writes.
 *
 * Written for speed like decodeInts (state in locals, every binary
 * decision written out); the symbol is found by comparison for symbols 0
 * and 1, else from t = floor(code / r) and a 64-entry table per bucket
 * (the first symbol whose interval may hold t >> 9 << 9), refilled at each
 * rebuild, and a short step up.
 */
export function decodeSymbols(all: Uint8Array, m: number, n: number, codes: Uint8Array | null, out: Int32Array): void {
  // The range stream's length: a `length` varint (1 to 5 bytes, shortest form, below 2^32).
  let rlen = 0;
  let at = 0;
  for (let scale = 1; ; scale *= 128) {
    if (at === all.length) throw new CodeStreamError('the stream ends inside its range-stream length');
    const byte = all[at++];
    rlen += (byte & 0x7f) * scale;
    if ((byte & 0x80) === 0) {
      if (byte === 0 && at > 1) throw new CodeStreamError('the range-stream length is not in its shortest form');
      break;
    }
    if (at === 5) throw new CodeStreamError('the range-stream length takes more than 5 bytes');
  }
  if (rlen < 4) throw new CodeStreamError(`a range stream is at least 4 bytes, this one ${rlen}`);
  if (rlen > all.length - at) throw new CodeStreamError(`the range stream's length ${rlen} reaches beyond the ${all.length - at} bytes after it`);
  const bytes = all.subarray(at, at + rlen);
  const code = ((bytes[0] << 24) | (bytes[1] << 16) | (bytes[2] << 8) | bytes[3]) >>> 0;
  if (code >= 0xffffffff) throw new CodeStreamError('the range stream starts with FF FF FF FF, which no encoder writes');
  const image = symbolKernelImage();
  const k = image === null ? null : symbolsKernel(all, at, rlen, code, m, n, codes, out, image);
  if (k === null) {
    decodeRanges(bytes, all.subarray(at + rlen), code, m, n, codes, out);
    return;
  }
  const rawLength = all.length - at - rlen;
  if (k.status === 1) throw rawEnds(rawLength, k.failedAt);
  if (k.status === 2) throw beyondLimit(k.failedAt);
  refuseEnds(k.zeroAfterFlag, k.pos, rlen, k.bits, rawLength, k.lastByte);
}

let image: Uint8Array | null | undefined;
/** The kernel's image of a fresh model (src/wasm/symbols.ts), made once; null where the kernel cannot take this model. Library-internal. */
export function symbolKernelImage(): Uint8Array | null {
  if (image === undefined) {
    const md = newSymbolModel();
    const lut = new Uint8Array(BUCKETS * 64);
    for (let b = 0; b < BUCKETS; b++) fillLut(lut, md.E, b);
    image = symbolModelImage({ ...md, lut, ...newBinary() });
  }
  return image;
}

function rawEnds(rawLength: number, c: number): CodeStreamError {
  return new CodeStreamError(`the raw bit section (${rawLength} bytes) ends before value ${c} does`);
}

function beyondLimit(c: number): CodeStreamError {
  return new CodeStreamError(`value ${c} exceeds 2^30 in magnitude`);
}

/**
 * The refusals after the last value, in this order: a zero symbol after a
 * non-zero flag at cell `zeroAfterFlag` (-1: none), a range stream that ran
 * short (`pos` past `end`) or has bytes left, a raw section of another
 * length than its `bits` take, or whose last byte (`lastByte`) pads with 1s.
 */
function refuseEnds(zeroAfterFlag: number, pos: number, end: number, bits: number, rawLength: number, lastByte: number): void {
  if (zeroAfterFlag >= 0) throw new CodeStreamError(`value ${zeroAfterFlag}: the zero symbol after a non-zero flag, which no encoder writes`);
  if (pos > end) throw new CodeStreamError(`the range stream ends ${pos - end} byte(s) before its values do`);
  if (pos !== end) throw new CodeStreamError(`${end - pos} byte(s) follow the end of the range stream`);
  const used = (bits + 7) >>> 3;
  if (used !== rawLength) throw new CodeStreamError(`the raw bit section holds ${rawLength} bytes, its values take ${used}`);
  if ((bits & 7) !== 0 && (lastByte & (0xff >>> (bits & 7))) !== 0) throw new CodeStreamError('the raw bit section pads its last byte with bits other than 0');
}

/** The decoding loop of {@link decodeSymbols} in JavaScript: `bytes` the range stream (first four bytes `code0`, checked), `raw` the raw bit section. */
function decodeRanges(bytes: Uint8Array, raw: Uint8Array, code0: number, m: number, n: number, codes: Uint8Array | null, out: Int32Array): void {
  const rawLength = raw.length;
  // The raw section with 4 zero bytes after it, so a read of 4 bytes at any bit position stays inside.
  const rawB = new Uint8Array(rawLength + 4);
  rawB.set(raw);
  let bp = 0;
  const md = newSymbolModel();
  const E = md.E;
  const F = md.F;
  const dleft = md.left;
  const S1 = SYMBOLS + 1;
  const lut = new Uint8Array(BUCKETS * 64);
  for (let b = 0; b < BUCKETS; b++) fillLut(lut, E, b);
  const { p, count } = newBinary();
  const shifts = SHIFTS;
  const end = bytes.length;
  let code = code0;
  let range = 0xffffffff;
  let pos = 4;
  let ctx = 0;
  let pr = 0;
  let cnt = 0;
  let bound = 0;
  let bit = 0;
  const masked = codes !== null;
  const valid = Cell.Valid;
  // The first cell whose zero flag said non-zero and whose symbol then said 0 (no encoder writes that), or -1.
  let zeroAfterFlag = -1;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    let left = 0;
    let aLeft = 0;
    let up = i > 0 ? out[row - n] : 0;
    let aUp = up < 0 ? -up : up;
    let aUpLeft = 0;
    for (let j = 0; j < n; j++) {
      // True when a run below ended on a 1 zero flag (bucket 0): the value is not 0.
      let nonzero = false;
      if (!masked && (aLeft | aUp | aUpLeft) === 0) {
        // A run of zeros in bucket 0, as in decodeInts.
        let pr0 = p[ZERO_AT];
        let cnt0 = count[ZERO_AT];
        for (; j < n; j++) {
          const c = row + j;
          if (i > 0 && j + 1 < n && out[c - n + 1] !== 0) break;
          bound = Math.imul(range >>> PROB_BITS, pr0) >>> 0;
          const shift = shifts[cnt0];
          if (cnt0 < 255) cnt0++;
          if (code < bound) {
            range = bound;
            pr0 = pr0 + ((PROB_ONE - pr0) >> shift);
          } else {
            code = (code - bound) >>> 0;
            range = (range - bound) >>> 0;
            pr0 = pr0 - (pr0 >> shift);
            nonzero = true;
          }
          while (range < TOP) {
            range = (range << 8) >>> 0;
            code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
            pos++;
          }
          if (nonzero) break;
          out[c] = 0;
        }
        p[ZERO_AT] = pr0;
        count[ZERO_AT] = cnt0;
        if (j === n) break;
      }
      const c = row + j;
      const upRight = i > 0 && j + 1 < n ? out[c - n + 1] : 0;
      const aUpRight = upRight < 0 ? -upRight : upRight;
      if (masked && codes[c] !== valid) {
        out[c] = 0;
        left = 0;
        aLeft = 0;
        aUpLeft = aUp;
        up = upRight;
        aUp = aUpRight;
        continue;
      }
      const a = 2 * aLeft + 2 * aUp + aUpLeft + aUpRight;
      const b = 32 - Math.clz32(a > 0x7fff ? 0x7fff : a);
      if (b < FLAG_BUCKETS && !nonzero) {
        // Decision: zero flag.
        ctx = ZERO_AT + b;
        pr = p[ctx];
        cnt = count[ctx];
        bound = Math.imul(range >>> PROB_BITS, pr) >>> 0;
        if (code < bound) {
          range = bound;
          p[ctx] = pr + ((PROB_ONE - pr) >> shifts[cnt]);
          bit = 0;
        } else {
          code = (code - bound) >>> 0;
          range = (range - bound) >>> 0;
          p[ctx] = pr - (pr >> shifts[cnt]);
          bit = 1;
        }
        if (cnt < 255) count[ctx] = cnt + 1;
        while (range < TOP) {
          range = (range << 8) >>> 0;
          code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
          pos++;
        }
        if (bit === 0) {
          out[c] = 0;
          left = 0;
          aLeft = 0;
          aUpLeft = aUp;
          up = upRight;
          aUp = aUpRight;
          continue;
        }
      }
      // The symbol: [r E[s], r E[s+1]) holds code (the last symbol takes the rest of the range).
      const base = b * S1;
      const r = range >>> TOTAL_BITS;
      let s = 0;
      let lo = 0;
      let hi = Math.imul(r, E[base + 1]) >>> 0;
      if (code >= hi) {
        lo = hi;
        hi = Math.imul(r, E[base + 2]) >>> 0;
        s = 1;
        if (code >= hi) {
          const t = (code / r) >>> 0;
          const u = t >>> 9;
          s = u > 63 ? ESCAPE : lut[b * 64 + u];
          if (s < 2) s = 2;
          while (s < ESCAPE && t >= E[base + s + 1]) s++;
          lo = Math.imul(r, E[base + s]) >>> 0;
          hi = s === ESCAPE ? range : Math.imul(r, E[base + s + 1]) >>> 0;
        }
      }
      code = (code - lo) >>> 0;
      range = (hi - lo) >>> 0;
      while (range < TOP) {
        range = (range << 8) >>> 0;
        code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
        pos++;
      }
      F[b * SYMBOLS + s] += INC;
      if (--dleft[b] === 0) {
        rebuild(md, b);
        fillLut(lut, E, b);
      }
      let v = 0;
      if (s !== 0) {
        let k = 0;
        let mag = 1;
        if (s < ESCAPE) {
          if (s > 1) {
            k = s >> 1;
            mag = 2 + (s & 1);
          }
        } else {
          // Decisions: the class above 11 in unary (at most 18 ones), then the bit below the leading one
          // (one loop for both: the escape is rare, and its decisions are written out once).
          k = ESC_K;
          let top = false;
          for (;;) {
            ctx = top ? TOP_AT + k - ESC_K : ESC_AT + k - ESC_K;
            pr = p[ctx];
            cnt = count[ctx];
            bound = Math.imul(range >>> PROB_BITS, pr) >>> 0;
            if (code < bound) {
              range = bound;
              p[ctx] = pr + ((PROB_ONE - pr) >> shifts[cnt]);
              bit = 0;
            } else {
              code = (code - bound) >>> 0;
              range = (range - bound) >>> 0;
              p[ctx] = pr - (pr >> shifts[cnt]);
              bit = 1;
            }
            if (cnt < 255) count[ctx] = cnt + 1;
            while (range < TOP) {
              range = (range << 8) >>> 0;
              code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
              pos++;
            }
            if (top) break;
            if (bit === 1 && ++k < 30) continue;
            top = true;
          }
          mag = 2 + bit;
        }
        // Decision: sign.
        ctx = SIGN_AT + 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1);
        pr = p[ctx];
        cnt = count[ctx];
        bound = Math.imul(range >>> PROB_BITS, pr) >>> 0;
        if (code < bound) {
          range = bound;
          p[ctx] = pr + ((PROB_ONE - pr) >> shifts[cnt]);
          bit = 0;
        } else {
          code = (code - bound) >>> 0;
          range = (range - bound) >>> 0;
          p[ctx] = pr - (pr >> shifts[cnt]);
          bit = 1;
        }
        if (cnt < 255) count[ctx] = cnt + 1;
        while (range < TOP) {
          range = (range << 8) >>> 0;
          code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
          pos++;
        }
        // The k - 1 raw bits below the top two.
        if (k > 1) {
          const nb = k - 1;
          let w = 0;
          if (nb <= 24) {
            const q = bp >>> 3;
            w = (((rawB[q] << 24) | (rawB[q + 1] << 16) | (rawB[q + 2] << 8) | rawB[q + 3]) << (bp & 7)) >>> (32 - nb);
            bp += nb;
          } else {
            for (let x = 0; x < nb; x++) {
              w = w * 2 + ((rawB[bp >>> 3] >>> (7 - (bp & 7))) & 1);
              bp++;
            }
          }
          if (bp > 8 * rawLength) throw rawEnds(rawLength, c);
          // Integer arithmetic throughout (mag < 4, nb <= 29: below 2^31), so the values stay small integers for V8.
          mag = (mag << nb) | w;
          if (mag > 0x40000000) throw beyondLimit(c);
        }
        v = bit !== 0 ? -mag : mag;
      } else if (b < FLAG_BUCKETS && zeroAfterFlag < 0) {
        // Refused after the loop: a throw here, in the hot loop, cost a third of the decoding time (V8 12, Node 20).
        zeroAfterFlag = c;
      }
      out[c] = v;
      left = v;
      aLeft = v < 0 ? -v : v;
      aUpLeft = aUp;
      up = upRight;
      aUp = aUpRight;
    }
  }
  refuseEnds(zeroAfterFlag, pos, end, bp, rawLength, rawB[bp >>> 3]);
}
