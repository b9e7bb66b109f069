/**
 * The binary coder's encoder of coded integer streams
 * (src/codec/code-encode.ts, encodeIntsWithin; spec/FORMAT.md, "Coded
 * integer streams"), decision for decision: the same adaptive model (a
 * 16-bit probability per context, adapted by the shift min(5, bit length of
 * its count + 1)), the same contexts from the carried neighbours, the same
 * run loop for zeros in a zero neighbourhood, and the same bytes. The range
 * is u32 as in the JavaScript ((range >> 16) times a probability is below
 * 2^32), the low end u64 (below 2^32 plus a carry, as the JavaScript's
 * double holds it).
 *
 * Each value's decisions are written out in the order they are taken (zero
 * flag; sign; the class ones in a loop and the class zero; two mantissa
 * bits; the direct bits), each with its bit known where it is coded,
 * rather than listed and coded in one loop that branches on the decision's
 * number: on the residual grids the encoder codes (scratch/ints-bench.mjs,
 * the grids of packs of bench/'s annual-precip, turbulence, volcano and
 * large fields at rel:1e-3 and psnr:60), 1.35-1.5x faster with the
 * model's state below. Tried there and left (new against this, same runs):
 * each row's decisions listed first and coded in one flat loop, 0.25-0.76x;
 * a switch on the class with k <= 2 written out, 1.00-1.03x at 5.9 KB; the
 * byte output written out at each decision, 0.86-0.99x (the function is
 * kept); magnitudes clamped to 2^15 - 1 and carried along the row in i32,
 * 0.95-0.98x; range - bound as (range & 0xffff) + (range >> 16)(65536 - p),
 * 0.94-0.97x. What is left is a decision's dependent chain (2.7 ns a
 * decision on grids of all 5s, no branch mispredicted) and the branches on
 * a value's class and zero flag (a random 0 or 1 a cell costs 9.2-9.6 ns,
 * two decisions on average; scratch/ints-synth.mjs).
 *
 * The model's state, one u32 a context (this kernel's own layout: the
 * JavaScript's Uint16Array and Uint8Array are not read back): the
 * probability in the low 16 bits, and x = min(count + 1, 16) above, whose
 * bit length is the shift (the shift is 5 from count 15 on, so a count
 * past 15 need not be kept): one load and one store a decision, no branch
 * on the count. Contexts (src/codec/code-model.ts): ZERO_AT = 0 (16
 * buckets), SIGN_AT = 16 (9), CLASS_AT = 25 (16 buckets x 31 classes),
 * MANT_AT = 521 (31 classes x 3), 614 in all. Cell class Valid = 0
 * (src/codec/mask.ts).
 *
 * The bytes go straight to `out` and a carry is added into the bytes
 * before it (ByteSink holds the last byte and a count of 0xff bytes back
 * instead: the same bytes, the carry reaching the same ones). ByteSink's
 * count of bytes written, which the `atMost` test compares, is the
 * position of the last byte taken out that was not 0xff or came with a
 * carry: that byte's arrival flushed every byte before it.
 *
 * Memory (byte addresses): values (m x n i32), codes (m x n u8, or 0 for
 * no mask), model (614 u32, set here), out (`cap` bytes). Result: 0 when
 * the stream is written (`written` bytes at out); 1 once the bytes written
 * pass `atMost` after a row (the JavaScript's null); 2 when the caller must
 * code in JavaScript instead: a skipped cell holds a value other than 0
 * (the JavaScript throws), a value exceeds 2^30 in magnitude (outside what
 * the model is for), or the stream outgrows `cap`.
 */

const SIGN_AT: i32 = 16;
const CLASS_AT: i32 = 25;
const CLASSES: i32 = 31;
const MANT_AT: i32 = 521;
const CONTEXTS: i32 = 614;
const TOP: u32 = 0x1000000;
/** A fresh context: probability 1/2, x = 1 (count 0). */
const FRESH: u32 = 0x18000;

/** Bytes of the finished stream at out. */
export let written: i32 = 0;
/** The output, its size, the bytes taken out so far, ByteSink's count of them, and whether one did not fit. */
let outAt: usize = 0;
let capAt: i32 = 0;
let pos: i32 = 0;
let flushed: i32 = 0;
let over = false;

/**
 * Take the top byte of low out (ByteSink.shiftLow), a carry into the bytes
 * before it; the new low. A function of its own (and its state in globals):
 * it runs once a byte, and written out at each decision it made the
 * kernel slower (3-5% on the grids above).
 */
function shiftByte(low: u64): u64 {
  if (pos >= capAt) {
    over = true;
    return (low & 0xffffff) << 8;
  }
  const top = <u32>(low >> 24);
  if (top > 0xff) {
    for (let q = pos - 1; q >= 0; q--) {
      const b = <u32>load<u8>(outAt + <usize>q) + 1;
      store<u8>(outAt + <usize>q, <u8>b);
      if (b < 0x100) break;
    }
  }
  // ByteSink's first byte is held back and never written (it is always 0): position 0 here is its second.
  if (top !== 0xff) flushed = pos;
  store<u8>(outAt + <usize>pos, <u8>top);
  pos++;
  return (low & 0xffffff) << 8;
}

export function encodeInts(values: usize, m: i32, n: i32, codes: usize, model: usize, out: usize, cap: i32, atMost: f64): i32 {
  for (let c = 0; c < CONTEXTS; c++) store<u32>(model + (<usize>c << 2), FRESH);
  outAt = out;
  capAt = cap;
  pos = 0;
  flushed = 0;
  over = false;
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
        // A run of zeros in a zero neighbourhood: one zero-flag decision of context ZERO_AT a cell, its state in a local.
        let st0: u32 = load<u32>(model);
        for (; j < n; j++) {
          const c = row + j;
          if (load<i32>(values + (<usize>c << 2)) !== 0 || (i > 0 && j + 1 < n && load<i32>(values + (<usize>(c - n + 1) << 2)) !== 0)) break;
          const pr0 = st0 & 0xffff;
          const x0 = st0 >> 16;
          range = (range >> 16) * pr0;
          st0 = (pr0 + ((65536 - pr0) >> (32 - clz<u32>(x0)))) | ((x0 + 1 - (x0 >> 4)) << 16);
          while (range < TOP) {
            range = range << 8;
            low = shiftByte(low);
          }
        }
        store<u32>(model, st0);
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
      // mag of -2^31 wraps to itself, 2^31 as u32: beyond 2^30 either way.
      if (<u32>mag > 0x40000000) return 2;
      // Each decision: the context's state, the bound, either half of the range (without a branch on a bit
      // that is data), the state adapted, and the range renormalised.
      // The zero flag.
      let ctx: usize = model + (<usize>bucket << 2);
      let st: u32 = load<u32>(ctx);
      let pr: u32 = st & 0xffff;
      let x: u32 = st >> 16;
      let s: u32 = 32 - clz<u32>(x);
      let bound: u32 = (range >> 16) * pr;
      let one = v !== 0;
      low += select<u64>(<u64>bound, 0, one);
      range = select<u32>(range - bound, bound, one);
      store<u32>(ctx, select<u32>(pr - (pr >> s), pr + ((65536 - pr) >> s), one) | ((x + 1 - (x >> 4)) << 16));
      while (range < TOP) {
        range = range << 8;
        low = shiftByte(low);
      }
      if (v !== 0) {
        // The sign.
        ctx = model + (<usize>(SIGN_AT + 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1)) << 2);
        st = load<u32>(ctx);
        pr = st & 0xffff;
        x = st >> 16;
        s = 32 - clz<u32>(x);
        bound = (range >> 16) * pr;
        one = v < 0;
        low += select<u64>(<u64>bound, 0, one);
        range = select<u32>(range - bound, bound, one);
        store<u32>(ctx, select<u32>(pr - (pr >> s), pr + ((65536 - pr) >> s), one) | ((x + 1 - (x >> 4)) << 16));
        while (range < TOP) {
          range = range << 8;
          low = shiftByte(low);
        }
        // The class k (|v| in [2^k, 2^(k+1))) in unary: k ones, then a zero below 30.
        const k: i32 = 31 - clz<i32>(mag);
        ctx = model + (<usize>(CLASS_AT + bucket * CLASSES) << 2);
        const end = ctx + (<usize>k << 2);
        for (; ctx < end; ctx += 4) {
          st = load<u32>(ctx);
          pr = st & 0xffff;
          x = st >> 16;
          bound = (range >> 16) * pr;
          low += <u64>bound;
          range -= bound;
          store<u32>(ctx, (pr - (pr >> (32 - clz<u32>(x)))) | ((x + 1 - (x >> 4)) << 16));
          while (range < TOP) {
            range = range << 8;
            low = shiftByte(low);
          }
        }
        if (k < 30) {
          st = load<u32>(ctx);
          pr = st & 0xffff;
          x = st >> 16;
          range = (range >> 16) * pr;
          store<u32>(ctx, (pr + ((65536 - pr) >> (32 - clz<u32>(x)))) | ((x + 1 - (x >> 4)) << 16));
          while (range < TOP) {
            range = range << 8;
            low = shiftByte(low);
          }
        }
        if (k > 0) {
          // The two bits below the top one with contexts (the second's given the first), at MANT_AT + 3k (+ 1 + top).
          const top: u32 = (<u32>mag >> (k - 1)) & 1;
          ctx = model + (<usize>(MANT_AT + 3 * k) << 2);
          const last = k > 1 ? k - 2 : 0;
          for (let b = k - 1; b >= last; b--) {
            st = load<u32>(ctx);
            pr = st & 0xffff;
            x = st >> 16;
            s = 32 - clz<u32>(x);
            bound = (range >> 16) * pr;
            one = ((<u32>mag >> b) & 1) !== 0;
            low += select<u64>(<u64>bound, 0, one);
            range = select<u32>(range - bound, bound, one);
            store<u32>(ctx, select<u32>(pr - (pr >> s), pr + ((65536 - pr) >> s), one) | ((x + 1 - (x >> 4)) << 16));
            while (range < TOP) {
              range = range << 8;
              low = shiftByte(low);
            }
            ctx += 4 + (<usize>top << 2);
          }
          // The bits below those, at probability 1/2, most significant first.
          for (let b = k - 3; b >= 0; b--) {
            range = range >> 1;
            if (((mag >>> b) & 1) !== 0) low += range;
            while (range < TOP) {
              range = range << 8;
              low = shiftByte(low);
            }
          }
        }
      }
      upLeft = up;
      up = upRight;
      left = v;
    }
    if (over) return 2;
    if (<f64>flushed > atMost) return 1;
  }
  // Flush (ByteSink.finish): five more bytes, of which ByteSink writes all but the last (always 0).
  for (let b = 0; b < 5; b++) low = shiftByte(low);
  if (over) return 2;
  written = flushed;
  return 0;
}
