/**
 * The symbol coder's decoder of residual streams (src/codec/code-symbols.ts,
 * decodeSymbols; spec/FORMAT.md 10.3.8), decision for decision: the same
 * adaptive frequency counts and cumulative tables (rebuilt on the same
 * schedule, halved at the same totals), the same 64-entry lookup table per
 * bucket, the same binary decisions (zero flag, escape classes, sign) with
 * the model of src/codec/code-model.ts, the same raw bits, and the same run
 * loop for zeros in a zero neighbourhood. The range arithmetic is on u32 as
 * in the JavaScript (range >> 16 times a probability, and range >> 15 times
 * a cumulative count of at most 2^15, are below 2^32); t = floor(code / r)
 * is an unsigned division, the same integer as the JavaScript's
 * floor of a binary64 quotient (code < 2^32, r < 2^17: the quotient's
 * distance to the next integer, at least 1/r, is far above its rounding
 * error). Each decision is written out where it is taken, as in
 * kernels/ints.ts, which says why.
 *
 * Memory (byte addresses): range (the range stream, `end` bytes; the first
 * four already read by the caller into `code0`), raw (the raw bit section,
 * `rawLength` bytes and then four zero bytes), codes (m x n u8, or 0 for no
 * mask), out (m x n i32), and the model at `model`, laid out by the caller
 * from a fresh one (offsets below). Result: 0 when every value is decoded;
 * 1 when the raw bit section ends before value `failedAt` does; 2 when
 * value `failedAt` exceeds 2^30. `finalPos` is then the position in the
 * range stream (past `end` when it ran short, as the JavaScript counts it),
 * `bitPos` the position in the raw section, in bits, and `zeroAfterFlag`
 * the first cell whose symbol was 0 after a non-zero zero flag (-1: none).
 */

const SYMBOLS: i32 = 25;
const ESCAPE: i32 = 24;
const ESC_K: i32 = 12;
const FLAG_BUCKETS: i32 = 4;
const TOTAL: u32 = 32768;
const INC: i32 = 32;
const FIRST: i32 = 8;
const EVERY: i32 = 256;
const LIMIT: i32 = 32768;
/** Binary contexts: zero flag of buckets 0-3, sign (9), escape unary steps (18), top bit (19). */
const ZERO_AT: i32 = 0;
const SIGN_AT: i32 = 4;
const ESC_AT: i32 = 13;
const TOP_AT: i32 = 31;
const TOP: u32 = 0x1000000;

/** The model's parts, byte offsets from `model`: counts F (16 x 25 i32), tables E (16 x 26 i32), symbols left (16 i32), rebuilds (16 i32), lookup (16 x 64 u8), probabilities (50 u16), counts of the binary contexts (50 u8). */
const F_AT: i32 = 0;
const E_AT: i32 = F_AT + 16 * 25 * 4;
const LEFT_AT: i32 = E_AT + 16 * 26 * 4;
const REBUILDS_AT: i32 = LEFT_AT + 16 * 4;
const LUT_AT: i32 = REBUILDS_AT + 16 * 4;
const P_AT: i32 = LUT_AT + 16 * 64;
const COUNT_AT: i32 = P_AT + 50 * 2;

/** Where the range stream stopped (may pass its end). */
export let finalPos: i32 = 0;
/** Bits of the raw section read. */
export let bitPos: i32 = 0;
/** The cell that stopped the decoding (results 1 and 2). */
export let failedAt: i32 = 0;
/** The first cell with the zero symbol after a non-zero flag, or -1. */
export let zeroAfterFlag: i32 = -1;

/** The adaptation shift for a context seen `cnt` times (SHIFTS in code-model.ts). */
@inline
function shiftOf(cnt: u32): u32 {
  const s = 32 - clz<u32>(cnt + 1);
  return s > 5 ? 5 : s;
}

/** rebuild() of code-symbols.ts for bucket b, then its lookup table (fillLut). */
function rebuild(md: usize, b: i32): void {
  const fb = md + <usize>F_AT + (<usize>(b * SYMBOLS) << 2);
  const eb = md + <usize>E_AT + (<usize>(b * (SYMBOLS + 1)) << 2);
  let total: u32 = 0;
  for (let s = 0; s < SYMBOLS; s++) total += load<u32>(fb + (<usize>s << 2));
  // cum < 2^16 and TOTAL - SYMBOLS < 2^15: the product stays below 2^31, and floor is the unsigned division.
  let cum: u32 = 0;
  for (let s = 0; s < SYMBOLS; s++) {
    store<u32>(eb + (<usize>s << 2), <u32>s + (cum * (TOTAL - <u32>SYMBOLS)) / total);
    cum += load<u32>(fb + (<usize>s << 2));
  }
  store<u32>(eb + (<usize>SYMBOLS << 2), TOTAL);
  if (total > <u32>LIMIT) for (let s = 0; s < SYMBOLS; s++) store<u32>(fb + (<usize>s << 2), (load<u32>(fb + (<usize>s << 2)) + 1) >> 1);
  const ra = md + <usize>REBUILDS_AT + (<usize>b << 2);
  let k = load<i32>(ra);
  if (k < 5) store<i32>(ra, ++k);
  const next = FIRST << k;
  store<i32>(md + <usize>LEFT_AT + (<usize>b << 2), next < EVERY ? next : EVERY);
  // The lookup table: entry u is the first symbol whose interval may hold t with t >> 9 = u.
  const lut = md + <usize>LUT_AT + (<usize>b << 6);
  let s = 0;
  for (let u = 0; u < 64; u++) {
    while (s < ESCAPE && load<i32>(eb + (<usize>(s + 1) << 2)) <= u << 9) s++;
    store<u8>(lut + <usize>u, <u8>s);
  }
}

export function decodeSymbols(range0: usize, end: i32, code0: u32, raw: usize, rawLength: i32, m: i32, n: i32, codes: usize, out: usize, md: usize): i32 {
  const F = md + <usize>F_AT;
  const E = md + <usize>E_AT;
  const dleft = md + <usize>LEFT_AT;
  const lut = md + <usize>LUT_AT;
  const p = md + <usize>P_AT;
  const count = md + <usize>COUNT_AT;
  const rawBits = rawLength << 3;
  let code: u32 = code0;
  let range: u32 = 0xffffffff;
  let pos: i32 = 4;
  let bp: i32 = 0;
  let bound: u32 = 0;
  let bit: i32 = 0;
  let ctx: i32 = 0;
  let pr: u32 = 0;
  let cnt: u32 = 0;
  const masked = codes !== 0;
  zeroAfterFlag = -1;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    let left: i32 = 0;
    let aLeft: i32 = 0;
    let up: i32 = i > 0 ? load<i32>(out + (<usize>(row - n) << 2)) : 0;
    let aUp: i32 = up < 0 ? -up : up;
    let aUpLeft: i32 = 0;
    for (let j = 0; j < n; j++) {
      // True when a run below ended on a 1 zero flag (bucket 0): the value is not 0.
      let nonzero = false;
      if (!masked && (aLeft | aUp | aUpLeft) === 0) {
        // A run of zeros in bucket 0, as in decodeInts.
        let pr0: u32 = load<u16>(p + (<usize>ZERO_AT << 1));
        let cnt0: u32 = load<u8>(count + <usize>ZERO_AT);
        for (; j < n; j++) {
          const c = row + j;
          if (i > 0 && j + 1 < n && load<i32>(out + (<usize>(c - n + 1) << 2)) !== 0) break;
          bound = (range >> 16) * pr0;
          const shift = shiftOf(cnt0);
          if (cnt0 < 255) cnt0++;
          if (code < bound) {
            range = bound;
            pr0 = pr0 + ((65536 - pr0) >> shift);
          } else {
            code -= bound;
            range -= bound;
            pr0 = pr0 - (pr0 >> shift);
            nonzero = true;
          }
          while (range < TOP) {
            range = range << 8;
            code = (code << 8) | (pos < end ? <u32>load<u8>(range0 + <usize>pos) : 0);
            pos++;
          }
          if (nonzero) break;
          store<i32>(out + (<usize>c << 2), 0);
        }
        store<u16>(p + (<usize>ZERO_AT << 1), <u16>pr0);
        store<u8>(count + <usize>ZERO_AT, <u8>cnt0);
        if (j === n) break;
      }
      const c = row + j;
      const upRight: i32 = i > 0 && j + 1 < n ? load<i32>(out + (<usize>(c - n + 1) << 2)) : 0;
      const aUpRight: i32 = upRight < 0 ? -upRight : upRight;
      if (masked && load<u8>(codes + <usize>c) !== 0) {
        store<i32>(out + (<usize>c << 2), 0);
        left = 0;
        aLeft = 0;
        aUpLeft = aUp;
        up = upRight;
        aUp = aUpRight;
        continue;
      }
      // The activity in i64: with magnitudes up to 2^30 it reaches 6 x 2^30 before the cap.
      const a: i64 = 2 * <i64>aLeft + 2 * <i64>aUp + <i64>aUpLeft + <i64>aUpRight;
      const b: i32 = 32 - clz<i32>(a > 0x7fff ? 0x7fff : <i32>a);
      if (b < FLAG_BUCKETS && !nonzero) {
        // Decision: zero flag.
        ctx = ZERO_AT + b;
        pr = load<u16>(p + (<usize>ctx << 1));
        cnt = load<u8>(count + <usize>ctx);
        bound = (range >> 16) * pr;
        if (code < bound) {
          range = bound;
          store<u16>(p + (<usize>ctx << 1), <u16>(pr + ((65536 - pr) >> shiftOf(cnt))));
          bit = 0;
        } else {
          code -= bound;
          range -= bound;
          store<u16>(p + (<usize>ctx << 1), <u16>(pr - (pr >> shiftOf(cnt))));
          bit = 1;
        }
        if (cnt < 255) store<u8>(count + <usize>ctx, <u8>(cnt + 1));
        while (range < TOP) {
          range = range << 8;
          code = (code << 8) | (pos < end ? <u32>load<u8>(range0 + <usize>pos) : 0);
          pos++;
        }
        if (bit === 0) {
          store<i32>(out + (<usize>c << 2), 0);
          left = 0;
          aLeft = 0;
          aUpLeft = aUp;
          up = upRight;
          aUp = aUpRight;
          continue;
        }
      }
      // The symbol: [r E[s], r E[s+1]) holds code (the last symbol takes the rest of the range).
      const base = E + (<usize>(b * (SYMBOLS + 1)) << 2);
      const r: u32 = range >> 15;
      let s: i32 = 0;
      let lo: u32 = 0;
      let hi: u32 = r * load<u32>(base + 4);
      if (code >= hi) {
        lo = hi;
        hi = r * load<u32>(base + 8);
        s = 1;
        if (code >= hi) {
          const t: u32 = code / r;
          const u: u32 = t >> 9;
          s = u > 63 ? ESCAPE : <i32>load<u8>(lut + (<usize>b << 6) + <usize>u);
          if (s < 2) s = 2;
          while (s < ESCAPE && t >= load<u32>(base + (<usize>(s + 1) << 2))) s++;
          lo = r * load<u32>(base + (<usize>s << 2));
          hi = s === ESCAPE ? range : r * load<u32>(base + (<usize>(s + 1) << 2));
        }
      }
      code -= lo;
      range = hi - lo;
      while (range < TOP) {
        range = range << 8;
        code = (code << 8) | (pos < end ? <u32>load<u8>(range0 + <usize>pos) : 0);
        pos++;
      }
      const fa = F + (<usize>(b * SYMBOLS + s) << 2);
      store<i32>(fa, load<i32>(fa) + INC);
      const la = dleft + (<usize>b << 2);
      const l1 = load<i32>(la) - 1;
      store<i32>(la, l1);
      if (l1 === 0) rebuild(md, b);
      let v: i32 = 0;
      if (s !== 0) {
        let k: i32 = 0;
        let mag: i32 = 1;
        if (s < ESCAPE) {
          if (s > 1) {
            k = s >> 1;
            mag = 2 + (s & 1);
          }
        } else {
          // Decisions: the class above 11 in unary (at most 18 ones), then the bit below the leading one.
          k = ESC_K;
          let top = false;
          for (;;) {
            ctx = top ? TOP_AT + k - ESC_K : ESC_AT + k - ESC_K;
            pr = load<u16>(p + (<usize>ctx << 1));
            cnt = load<u8>(count + <usize>ctx);
            bound = (range >> 16) * pr;
            if (code < bound) {
              range = bound;
              store<u16>(p + (<usize>ctx << 1), <u16>(pr + ((65536 - pr) >> shiftOf(cnt))));
              bit = 0;
            } else {
              code -= bound;
              range -= bound;
              store<u16>(p + (<usize>ctx << 1), <u16>(pr - (pr >> shiftOf(cnt))));
              bit = 1;
            }
            if (cnt < 255) store<u8>(count + <usize>ctx, <u8>(cnt + 1));
            while (range < TOP) {
              range = range << 8;
              code = (code << 8) | (pos < end ? <u32>load<u8>(range0 + <usize>pos) : 0);
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
        pr = load<u16>(p + (<usize>ctx << 1));
        cnt = load<u8>(count + <usize>ctx);
        bound = (range >> 16) * pr;
        if (code < bound) {
          range = bound;
          store<u16>(p + (<usize>ctx << 1), <u16>(pr + ((65536 - pr) >> shiftOf(cnt))));
          bit = 0;
        } else {
          code -= bound;
          range -= bound;
          store<u16>(p + (<usize>ctx << 1), <u16>(pr - (pr >> shiftOf(cnt))));
          bit = 1;
        }
        if (cnt < 255) store<u8>(count + <usize>ctx, <u8>(cnt + 1));
        while (range < TOP) {
          range = range << 8;
          code = (code << 8) | (pos < end ? <u32>load<u8>(range0 + <usize>pos) : 0);
          pos++;
        }
        // The k - 1 raw bits below the top two (most significant first; the four zero bytes after the section keep every read inside).
        if (k > 1) {
          const nb = k - 1;
          let w: u32 = 0;
          if (nb <= 24) {
            w = (bswap<u32>(load<u32>(raw + <usize>(bp >>> 3))) << (<u32>bp & 7)) >> (32 - nb);
            bp += nb;
          } else {
            for (let x = 0; x < nb; x++) {
              w = w * 2 + ((<u32>load<u8>(raw + <usize>(bp >>> 3)) >> (7 - (<u32>bp & 7))) & 1);
              bp++;
            }
          }
          if (bp > rawBits) {
            failedAt = c;
            finalPos = pos;
            bitPos = bp;
            return 1;
          }
          mag = (mag << nb) | <i32>w;
          if (mag > 0x40000000) {
            failedAt = c;
            finalPos = pos;
            bitPos = bp;
            return 2;
          }
        }
        v = bit !== 0 ? -mag : mag;
      } else if (b < FLAG_BUCKETS && zeroAfterFlag < 0) {
        zeroAfterFlag = c;
      }
      store<i32>(out + (<usize>c << 2), v);
      left = v;
      aLeft = v < 0 ? -v : v;
      aUpLeft = aUp;
      up = upRight;
      aUp = aUpRight;
    }
  }
  finalPos = pos;
  bitPos = bp;
  return 0;
}
