/**
 * The binary coder's encoder of coded integer streams
 * (src/codec/code-encode.ts, encodeIntsWithin; spec/FORMAT.md, "Coded
 * integer streams"), decision for decision: the same adaptive model (a
 * 16-bit probability and a count per context, the shift min(5, bit length
 * of count + 1)), the same contexts from the carried neighbours, the same
 * run loop for zeros in a zero neighbourhood, and the same byte output (the
 * last byte held back for a carry, and a count of 0xff bytes after it).
 * The range is u32 as in the JavaScript ((range >> 16) times a probability
 * is below 2^32), the low end u64 (below 2^32 plus a carry, as the
 * JavaScript's double holds it); the output is kernels/range-sink.ts.
 *
 * The model's layout (src/codec/code-model.ts): contexts ZERO_AT = 0
 * (16 buckets), SIGN_AT = 16 (9), CLASS_AT = 25 (16 buckets x 31 classes),
 * MANT_AT = 521 (31 classes x 3), 614 in all. Cell class Valid = 0
 * (src/codec/mask.ts).
 *
 * Memory (byte addresses): values (m x n i32), codes (m x n u8, or 0 for
 * no mask), p (614 u16) and count (614 u8), set here, out (`cap` bytes).
 * Result: 0 when the stream is written (`written` bytes at out); 1 once the
 * bytes written pass `atMost` after a row (the JavaScript's null); 2 when
 * the caller must code in JavaScript instead: a skipped cell holds a value
 * other than 0 (the JavaScript throws), a value exceeds 2^30 in magnitude
 * (outside what the model is for), or the stream outgrows `cap`.
 */

const ZERO_AT: i32 = 0;
const SIGN_AT: i32 = 16;
const CLASS_AT: i32 = 25;
const CLASSES: i32 = 31;
const MANT_AT: i32 = 521;
const CONTEXTS: i32 = 614;
const TOP: u32 = 0x1000000;

import { finishSink, overflow, shiftLow, startSink, written } from './range-sink';

/** The adaptation shift for a context seen `cnt` times (SHIFTS in code-model.ts). */
@inline
function shiftOf(cnt: u32): u32 {
  const s = 32 - clz<u32>(cnt + 1);
  return s > 5 ? 5 : s;
}

export function encodeInts(values: usize, m: i32, n: i32, codes: usize, p: usize, count: usize, out: usize, outCap: i32, atMost: f64): i32 {
  for (let c = 0; c < CONTEXTS; c++) {
    store<u16>(p + (<usize>c << 1), 32768);
    store<u8>(count + <usize>c, 0);
  }
  startSink(out, outCap);
  let low: u64 = 0;
  let range: u32 = 0xffffffff;
  const masked = codes !== 0;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    let left: i32 = 0;
    let up: i32 = i > 0 ? load<i32>(values + (<usize>(row - n) << 2)) : 0;
    let upLeft: i32 = 0;
    for (let j = 0; j < n; j++) {
      if (!masked && (left | up | upLeft) === 0) {
        // A run of zeros in a zero neighbourhood: one zero-flag decision of context ZERO_AT a cell.
        let pr0: u32 = load<u16>(p + (<usize>ZERO_AT << 1));
        let cnt0: u32 = load<u8>(count + <usize>ZERO_AT);
        for (; j < n; j++) {
          const c = row + j;
          if (load<i32>(values + (<usize>c << 2)) !== 0 || (i > 0 && j + 1 < n && load<i32>(values + (<usize>(c - n + 1) << 2)) !== 0)) break;
          range = (range >> 16) * pr0;
          pr0 = pr0 + ((65536 - pr0) >> shiftOf(cnt0));
          if (cnt0 < 255) cnt0++;
          while (range < TOP) {
            range = range << 8;
            low = shiftLow(low);
          }
        }
        store<u16>(p + (<usize>ZERO_AT << 1), <u16>pr0);
        store<u8>(count + <usize>ZERO_AT, <u8>cnt0);
        if (j === n) break;
      }
      const c = row + j;
      const upRight: i32 = i > 0 && j + 1 < n ? load<i32>(values + (<usize>(c - n + 1) << 2)) : 0;
      const v: i32 = load<i32>(values + (<usize>c << 2));
      if (masked && load<u8>(codes + <usize>c) !== 0) {
        if (v !== 0) return 2;
        left = 0;
        upLeft = up;
        up = upRight;
        continue;
      }
      // The activity in i64: magnitudes up to 2^31 make it reach 6 x 2^31 before the cap.
      const a: i64 = 2 * abs<i64>(<i64>left) + 2 * abs<i64>(<i64>up) + abs<i64>(<i64>upLeft) + abs<i64>(<i64>upRight);
      const bucket: i32 = 32 - clz<i32>(a > 0x7fff ? 0x7fff : <i32>a);
      const mag: i32 = v < 0 ? -v : v;
      // mag of -2^31 wraps to itself (negative as i32): beyond 2^30 either way.
      if (mag > 0x40000000 || mag < 0) return 2;
      // The value's adaptive decisions, each as the JavaScript lists and codes them: context, then bit.
      let k: i32 = 0;
      let ctx: i32 = ZERO_AT + bucket;
      let bit: i32 = v === 0 ? 0 : 1;
      if (v !== 0) k = 31 - clz<i32>(mag);
      // Decisions: 0 zero flag, 1 sign, 2 .. k + 1 class ones, then the class zero (k < 30), then up to two mantissa bits.
      const classEnd = v === 0 ? 0 : 2 + k + (k < 30 ? 1 : 0);
      const total = v === 0 ? 1 : classEnd + (k > 1 ? 2 : k);
      const cls = CLASS_AT + bucket * CLASSES;
      const top = k > 0 ? (mag >>> (k - 1)) & 1 : 0;
      for (let dn = 0; dn < total; dn++) {
        if (dn === 1) {
          ctx = SIGN_AT + 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1);
          bit = v < 0 ? 1 : 0;
        } else if (dn > 1 && dn < classEnd) {
          ctx = cls + dn - 2;
          bit = dn - 2 < k ? 1 : 0;
        } else if (dn > 1 && dn === classEnd) {
          ctx = MANT_AT + 3 * k;
          bit = top;
        } else if (dn > 1) {
          ctx = MANT_AT + 3 * k + 1 + top;
          bit = (mag >>> (k - 2)) & 1;
        }
        const pr: u32 = load<u16>(p + (<usize>ctx << 1));
        const cnt: u32 = load<u8>(count + <usize>ctx);
        const bound: u32 = (range >> 16) * pr;
        const shift = shiftOf(cnt);
        if (cnt < 255) store<u8>(count + <usize>ctx, <u8>(cnt + 1));
        // Either half of the range, without a branch on the bit (the class bits go either way: a
        // mispredicted branch would cost more than both halves' arithmetic).
        const one = bit !== 0;
        low += select<u64>(<u64>bound, 0, one);
        range = select<u32>(range - bound, bound, one);
        store<u16>(p + (<usize>ctx << 1), <u16>select<u32>(pr - (pr >> shift), pr + ((65536 - pr) >> shift), one));
        while (range < TOP) {
          range = range << 8;
          low = shiftLow(low);
        }
      }
      // The bits below the top two, at probability 1/2, most significant first.
      for (let b = k - 3; b >= 0; b--) {
        range = range >> 1;
        if (((mag >>> b) & 1) !== 0) low += range;
        while (range < TOP) {
          range = range << 8;
          low = shiftLow(low);
        }
      }
      upLeft = up;
      up = upRight;
      left = v;
    }
    if (overflow) return 2;
    if (<f64>written > atMost) return 1;
  }
  finishSink(low);
  return overflow ? 2 : 0;
}
