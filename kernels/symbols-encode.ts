/**
 * The symbol coder's encoder of residual streams
 * (src/codec/code-symbols-encode.ts, encodeSymbolsWithin; spec/FORMAT.md
 * 10.3.8), decision for decision: the same adaptive frequency counts and
 * cumulative tables (rebuilt on the same schedule, halved at the same
 * totals), the same binary decisions (zero flag, escape classes, sign) with
 * the model of src/codec/code-model.ts, and the same raw bits. The range
 * arithmetic is as in the JavaScript: range >> 15 times a cumulative count
 * of at most 2^15 is below 2^32, the low end is u64 (below 2^32 plus a
 * carry), the output kernels/range-sink.ts.
 *
 * Memory (byte addresses): values (m x n i32), codes (m x n u8, or 0 for
 * no mask), the model at `md` in the layout of kernels/symbols.ts (counts,
 * tables, symbols left, rebuilds, lookup tables unused here, binary
 * probabilities and counts), copied in by the caller from a fresh one, the
 * range stream's output (`cap` bytes) and the raw bits' (`rawCap` bytes).
 * Result: 0 when both are written (`written` and `rawWritten` bytes); 1
 * once, after a row, one byte (the least length word) and the bytes
 * written pass `atMost` (the JavaScript's null); 2 when the JavaScript
 * must code instead: a skipped cell holds a value other than 0 or a value
 * exceeds 2^30 (the JavaScript throws), or an output outgrows its room.
 */
import { finishSink, overflow, shiftLow, startSink, written } from './range-sink';

const SYMBOLS: i32 = 25;
const ESCAPE: i32 = 24;
const ESC_K: i32 = 12;
const FLAG_BUCKETS: i32 = 4;
const TOTAL: u32 = 32768;
const INC: i32 = 32;
const FIRST: i32 = 8;
const EVERY: i32 = 256;
const LIMIT: u32 = 32768;
/** Binary contexts: zero flag of buckets 0-3, sign (9), escape unary steps (18), top bit (19). */
const ZERO_AT: i32 = 0;
const SIGN_AT: i32 = 4;
const ESC_AT: i32 = 13;
const TOP_AT: i32 = 31;
const TOP: u32 = 0x1000000;

/** The model's parts, byte offsets from `md` (kernels/symbols.ts). */
const F_AT: i32 = 0;
const E_AT: i32 = F_AT + 16 * 25 * 4;
const LEFT_AT: i32 = E_AT + 16 * 26 * 4;
const REBUILDS_AT: i32 = LEFT_AT + 16 * 4;
const LUT_AT: i32 = REBUILDS_AT + 16 * 4;
const P_AT: i32 = LUT_AT + 16 * 64;
const COUNT_AT: i32 = P_AT + 50 * 2;

/** Whole bytes of raw bits written. */
export let rawWritten: i32 = 0;

/** rebuild() of code-symbols.ts for bucket b (its lookup table is the decoder's, not kept here). */
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
  if (total > LIMIT) for (let s = 0; s < SYMBOLS; s++) store<u32>(fb + (<usize>s << 2), (load<u32>(fb + (<usize>s << 2)) + 1) >> 1);
  const ra = md + <usize>REBUILDS_AT + (<usize>b << 2);
  let k = load<i32>(ra);
  if (k < 5) store<i32>(ra, ++k);
  const next = FIRST << k;
  store<i32>(md + <usize>LEFT_AT + (<usize>b << 2), next < EVERY ? next : EVERY);
}

/** The adaptation shift for a context seen `cnt` times (SHIFTS in code-model.ts). */
@inline
function shiftOf(cnt: u32): u32 {
  const s = 32 - clz<u32>(cnt + 1);
  return s > 5 ? 5 : s;
}

/** Code one bit of binary context ctx (RangeEncoder.bit); the range in and out through `escRange`, the low end returned. */
let escRange: u32 = 0;
function bit(low: u64, md: usize, b: i32, ctx: i32): u64 {
  const pa = md + <usize>P_AT + (<usize>ctx << 1);
  const ca = md + <usize>COUNT_AT + <usize>ctx;
  const pr: u32 = load<u16>(pa);
  const cnt: u32 = load<u8>(ca);
  const bound: u32 = (escRange >> 16) * pr;
  const shift = shiftOf(cnt);
  if (cnt < 255) store<u8>(ca, <u8>(cnt + 1));
  let l = low;
  if (b === 0) {
    escRange = bound;
    store<u16>(pa, <u16>(pr + ((65536 - pr) >> shift)));
  } else {
    l += bound;
    escRange -= bound;
    store<u16>(pa, <u16>(pr - (pr >> shift)));
  }
  while (escRange < TOP) {
    escRange = escRange << 8;
    l = shiftLow(l);
  }
  return l;
}

export function encodeSymbols(values: usize, m: i32, n: i32, codes: usize, md: usize, out: usize, cap: i32, raw: usize, rawRoom: i32, atMost: f64): i32 {
  startSink(out, cap);
  // The raw bits (BitWriter), in locals: bytes written, and the bits not yet written (the low `held`
  // bits of acc, fewer than 8 between values).
  let rawBytes: i32 = 0;
  let rawOverflow = false;
  let acc: u64 = 0;
  let held: i32 = 0;
  let range: u32 = 0xffffffff;
  let low: u64 = 0;
  const F = md + <usize>F_AT;
  const E = md + <usize>E_AT;
  const left = md + <usize>LEFT_AT;
  for (let i = 0; i < m; i++) {
    // The left, up and up-left values carried along the row (a skipped cell holds 0, as the JavaScript reads it).
    let nextL: i32 = 0;
    let nextU: i32 = i > 0 ? load<i32>(values + (<usize>((i - 1) * n) << 2)) : 0;
    let nextUl: i32 = 0;
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const v = load<i32>(values + (<usize>c << 2));
      const l = nextL;
      const u = nextU;
      const ul = nextUl;
      const ur = i > 0 && j + 1 < n ? load<i32>(values + (<usize>(c - n + 1) << 2)) : 0;
      nextL = v;
      nextUl = u;
      nextU = ur;
      if (codes !== 0 && load<u8>(codes + <usize>c) !== 0) {
        if (v !== 0) return 2;
        continue;
      }
      // bucketOf (code-model.ts), in i64: magnitudes up to 2^31 make it reach 6 x 2^31 before the cap.
      const a: i64 = 2 * abs<i64>(<i64>l) + 2 * abs<i64>(<i64>u) + abs<i64>(<i64>ul) + abs<i64>(<i64>ur);
      const b: i32 = 32 - clz<i32>(a > 0x7fff ? 0x7fff : <i32>a);
      if (b < FLAG_BUCKETS) {
        // The zero flag, written out here (range and low in locals; likewise the sign below).
        const pa = md + <usize>P_AT + (<usize>(ZERO_AT + b) << 1);
        const ca = md + <usize>COUNT_AT + <usize>(ZERO_AT + b);
        const pr: u32 = load<u16>(pa);
        const cnt: u32 = load<u8>(ca);
        const bound: u32 = (range >> 16) * pr;
        const shift = shiftOf(cnt);
        if (cnt < 255) store<u8>(ca, <u8>(cnt + 1));
        if (v === 0) {
          range = bound;
          store<u16>(pa, <u16>(pr + ((65536 - pr) >> shift)));
        } else {
          low += bound;
          range -= bound;
          store<u16>(pa, <u16>(pr - (pr >> shift)));
        }
        while (range < TOP) {
          range = range << 8;
          low = shiftLow(low);
        }
        if (v === 0) continue;
      }
      const mag: i32 = v < 0 ? -v : v;
      // mag of -2^31 wraps to itself (negative as i32): beyond 2^30 either way.
      if (mag > 0x40000000 || mag < 0) return 2;
      const k: i32 = mag === 0 ? -1 : 31 - clz<i32>(mag);
      const top: i32 = k > 0 ? (mag >>> (k - 1)) & 1 : 0;
      const s: i32 = v === 0 ? 0 : k === 0 ? 1 : k < ESC_K ? 2 * k + top : ESCAPE;
      const eb = E + (<usize>(b * (SYMBOLS + 1) + s) << 2);
      // The symbol's interval (RangeEncoder.interval): the escape takes the rest of the range.
      const r: u32 = range >> 15;
      const lo: u32 = r * load<u32>(eb);
      low += <u64>lo;
      range = s === ESCAPE ? range - lo : r * load<u32>(eb + 4) - lo;
      while (range < TOP) {
        range = range << 8;
        low = shiftLow(low);
      }
      const fa = F + (<usize>(b * SYMBOLS + s) << 2);
      store<i32>(fa, load<i32>(fa) + INC);
      const la = left + (<usize>b << 2);
      const remaining = load<i32>(la) - 1;
      store<i32>(la, remaining);
      if (remaining === 0) rebuild(md, b);
      if (v === 0) continue;
      if (s === ESCAPE) {
        // Rare: through bit(), with the range in its global for the calls.
        escRange = range;
        for (let e = ESC_K; e < k; e++) low = bit(low, md, 1, ESC_AT + e - ESC_K);
        if (k < 30) low = bit(low, md, 0, ESC_AT + k - ESC_K);
        low = bit(low, md, top, TOP_AT + k - ESC_K);
        range = escRange;
      }
      {
        const ctx = SIGN_AT + 3 * (l > 0 ? 2 : l < 0 ? 0 : 1) + (u > 0 ? 2 : u < 0 ? 0 : 1);
        const pa = md + <usize>P_AT + (<usize>ctx << 1);
        const ca = md + <usize>COUNT_AT + <usize>ctx;
        const pr: u32 = load<u16>(pa);
        const cnt: u32 = load<u8>(ca);
        const bound: u32 = (range >> 16) * pr;
        const shift = shiftOf(cnt);
        if (cnt < 255) store<u8>(ca, <u8>(cnt + 1));
        if (v > 0) {
          range = bound;
          store<u16>(pa, <u16>(pr + ((65536 - pr) >> shift)));
        } else {
          low += bound;
          range -= bound;
          store<u16>(pa, <u16>(pr - (pr >> shift)));
        }
        while (range < TOP) {
          range = range << 8;
          low = shiftLow(low);
        }
      }
      if (k > 1) {
        // The k - 1 bits below the top two's first, most significant first, a byte at a time.
        const bits = <u64>(k - 1);
        acc = (acc << bits) | (<u64>mag & ((<u64>1 << bits) - 1));
        held += k - 1;
        while (held >= 8) {
          held -= 8;
          if (rawBytes >= rawRoom) rawOverflow = true;
          else {
            store<u8>(raw + <usize>rawBytes, <u8>(acc >> <u64>held));
            rawBytes++;
          }
        }
        acc &= (<u64>1 << <u64>held) - 1;
      }
    }
    if (overflow || rawOverflow) return 2;
    if (1 + <f64>written + <f64>rawBytes > atMost) return 1;
  }
  finishSink(low);
  // The raw section's last byte, padded with zeros.
  if (held > 0) {
    if (rawBytes >= rawRoom) return 2;
    store<u8>(raw + <usize>rawBytes, <u8>(acc << <u64>(8 - held)));
    rawBytes++;
  }
  rawWritten = rawBytes;
  return overflow ? 2 : 0;
}
