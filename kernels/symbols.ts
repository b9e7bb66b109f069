/**
 * The symbol coder's decoder of residual streams (src/codec/code-symbols.ts,
 * decodeSymbols; spec/FORMAT.md 10.3.8), decision for decision: the same
 * adaptive frequency counts and cumulative tables (rebuilt on the same
 * schedule, halved at the same totals), the same binary decisions (zero
 * flag, escape classes, sign) with the model of src/codec/code-model.ts,
 * the same raw bits, and the same run loop for zeros in a zero
 * neighbourhood. The range arithmetic is on u32 as in the JavaScript
 * (range >> 16 times a probability, and range >> 15 times a cumulative
 * count of at most 2^15, are below 2^32). Each decision is written out
 * where it is taken, as in kernels/ints.ts, which says why.
 *
 * Written for fewer branches and instructions a value than the JavaScript
 * (the decoder's time is in this loop: 87% of a read of bench/'s
 * annual-precip grid, scratch/small-read.mjs under --cpu-prof): a binary
 * decision takes no branch on its bit (selects), except where the bit
 * decides what is decoded next (the zero flag, the escape's unary steps);
 * the sign's decision is taken for every symbol and left without effect
 * for 0; renormalisation takes the 0 to 3 bytes it needs at once, as a
 * shift of a word read from the range stream stored reversed (a
 * little-endian load is then the big-endian word, 0 past the end); the
 * symbol is found from t = floor(code / r) by comparing it with the 24
 * table entries four at a time (no search loop); the adaptation shifts
 * come from a table by count; each cell's neighbourhood (the up, up-left
 * and up-right magnitudes and the up sign) is one word per cell made from
 * the row above four cells at a time; and a bucket's table is rebuilt
 * after the cell, outside the cell loop, which so has no call in it.
 * Measured on the residual streams of bench/'s fields at rel:1e-3
 * (scratch/capture.mjs, then scratch/kernel-ab.mjs against the kernel
 * before, in one process, rounds alternating, medians of 15): 0.8 to 0.95
 * of the time a value.
 *
 * Memory (byte addresses): range (the range stream, `end` bytes, at least
 * 4; the first four already read by the caller into `code0`), raw (the raw
 * bit section, `rawLength` bytes and then four zero bytes), codes (m x n
 * u8, or 0 for no mask), out (m x n i32), and the model at `model`, laid
 * out by the caller from a fresh one (offsets below; its lookup tables are
 * not used here), followed by this kernel's working memory (WORK below).
 * Result: 0 when every value is decoded; 1 when the raw bit section ends
 * before value `failedAt` does; 2 when value `failedAt` exceeds 2^30.
 * `finalPos` is then the position in the range stream (past `end` when it
 * ran short, as the JavaScript counts it), `bitPos` the position in the raw
 * section, in bits, and `zeroAfterFlag` the first cell whose symbol was 0
 * after a non-zero zero flag (-1: none).
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

/**
 * WORK, the kernel's own working memory after the model: the shifts by
 * count (256 u8), the row above's neighbourhood words (n + 4 u32, below),
 * then four zero bytes and the range stream reversed (src/wasm/symbols.ts
 * sizes it).
 */
const SHIFT_AT: i32 = COUNT_AT + 56;
const ABOVE_AT: i32 = SHIFT_AT + 256;

/**
 * A cell's word for the row below it: bits 0-14 the row below's activity
 * from this row, min(2|up| + |up-left| + |up-right|, 0x7fff) (each
 * magnitude capped at 0x7fff first, which leaves the capped sum as it was);
 * bits 16-17 the sign of up, plus 1; bit 20 set when up and up-left are 0.
 */
const UZ: u32 = 1 << 20;

/** The word of cell j of the row at `q` (n cells) from its neighbours, the cells outside the row taken as 0. */
function edgeWord(q: usize, j: i32, n: i32): u32 {
  const x = load<i32>(q + (<usize>j << 2));
  const l = j > 0 ? load<i32>(q + (<usize>(j - 1) << 2)) : 0;
  const r = j + 1 < n ? load<i32>(q + (<usize>(j + 1) << 2)) : 0;
  const ax = <u32>min(abs(x), 0x7fff);
  const a = ax + ax + <u32>min(abs(l), 0x7fff) + <u32>min(abs(r), 0x7fff);
  return min(a, 0x7fff) | (<u32>(<i32>(x > 0) - <i32>(x < 0) + 1) << 16) | select<u32>(UZ, 0, (x | l) === 0);
}

/** The words of the row at `q` (n cells, |values| <= 2^30) into `above`, four cells at a time, the two end cells again with their outer neighbour 0. */
function rowWords(q: usize, n: i32, above: usize): void {
  const cap = i32x4.splat(0x7fff);
  const zero = i32x4.splat(0);
  const one = i32x4.splat(1);
  for (let j = 0; j < n; j += 4) {
    const at = q + (<usize>j << 2);
    const x = v128.load(at);
    const l = v128.load(at - 4);
    const ax = i32x4.min_u(i32x4.abs(x), cap);
    const a = i32x4.add(i32x4.add(ax, ax), i32x4.add(i32x4.min_u(i32x4.abs(l), cap), i32x4.min_u(i32x4.abs(v128.load(at + 4)), cap)));
    const sg = i32x4.add(i32x4.sub(one, i32x4.gt_s(x, zero)), i32x4.lt_s(x, zero));
    const uz = v128.and(v128.and(i32x4.eq(x, zero), i32x4.eq(l, zero)), i32x4.splat(UZ));
    v128.store(above + (<usize>j << 2), v128.or(v128.or(i32x4.min_u(a, cap), i32x4.shl(sg, 16)), uz));
  }
  store<u32>(above, edgeWord(q, 0, n));
  store<u32>(above + (<usize>(n - 1) << 2), edgeWord(q, n - 1, n));
}

/** rebuild() of code-symbols.ts for bucket b (exported so that it is not inlined into the decoding loop). */
export function rebuild(md: usize, b: i32): void {
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
}

export function decodeSymbols(range0: usize, end: i32, code0: u32, raw: usize, rawLength: i32, m: i32, n: i32, codes: usize, out: usize, md: usize): i32 {
  const rawBits = rawLength << 3;
  const shifts = md + <usize>SHIFT_AT;
  const above = md + <usize>ABOVE_AT;
  for (let x: u32 = 0; x < 256; x++) store<u8>(shifts + <usize>x, <u8>shiftOf(x));
  for (let j = 0; j < n; j++) store<u32>(above + (<usize>j << 2), (1 << 16) | UZ);
  // The range stream reversed after four zero bytes: the big-endian word at stream position pos (0 past the end) is the
  // little-endian word at top - min(pos, end), without a byte swap.
  const rb = above + (<usize>(n + 4) << 2) + 4;
  store<u32>(rb - 4, 0);
  let k = 0;
  for (; k + 16 <= end; k += 16) {
    const v = v128.load(range0 + <usize>(end - 16 - k));
    v128.store(rb + <usize>k, i8x16.shuffle(v, v, 15, 14, 13, 12, 11, 10, 9, 8, 7, 6, 5, 4, 3, 2, 1, 0));
  }
  for (; k < end; k++) store<u8>(rb + <usize>k, load<u8>(range0 + <usize>(end - 1 - k)));
  const top = rb + <usize>end - 4;
  let code: u32 = code0;
  let range: u32 = 0xffffffff;
  let pos: i32 = 4;
  let bp: i32 = 0;
  let bound: u32 = 0;
  let one = false;
  let ctx: usize = 0;
  let pr: u32 = 0;
  let cnt: u32 = 0;
  let sh: u32 = 0;
  let word: u32 = 0;
  let zaf: i32 = -1;
  const masked = codes !== 0;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    const rowEnd = row + n;
    // above + 4 j for cell c = row + j (wrapping arithmetic: the sum is the address).
    const ab = above - (<usize>row << 2);
    let left: i32 = 0;
    let aLeft: u32 = 0;
    // A bucket whose table is due for a rebuild: rebuilt after the cell, outside the cell loop (so that the loop has no call
    // in it), before the loop goes on from the next cell.
    let due: i32 = -1;
    let c = row;
    for (;;) {
      for (; c < rowEnd; c++) {
        // True when a run below ended on a 1 zero flag (bucket 0): the value is not 0.
        let nonzero = false;
        if (!masked && aLeft === 0 && (load<u32>(ab + (<usize>c << 2)) & UZ) !== 0) {
          // A run of zeros in bucket 0, as in decodeInts, while up-right is 0 (then the activity of the word is 0).
          let pr0: u32 = load<u16>(md + <usize>(P_AT + 2 * ZERO_AT));
          let cnt0: u32 = load<u8>(md + <usize>(COUNT_AT + ZERO_AT));
          for (; c < rowEnd; c++) {
            if ((load<u32>(ab + (<usize>c << 2)) & 0x7fff) !== 0) break;
            bound = (range >> 16) * pr0;
            const shift: u32 = load<u8>(shifts + <usize>cnt0);
            cnt0 += <u32>(cnt0 < 255);
            one = code >= bound;
            code -= select<u32>(bound, 0, one);
            range = select<u32>(range - bound, bound, one);
            pr0 = select<u32>(pr0 - (pr0 >> shift), pr0 + ((65536 - pr0) >> shift), one);
            // Renormalise: the bytes that bring range back to 2^24 or above, 0 to 3 of them, at once.
            sh = clz<u32>(range) & 24;
            word = load<u32>(top - <usize>(pos < end ? pos : end));
            range <<= sh;
            code = (code << sh) | ((word >> 1) >> (31 - sh));
            pos += <i32>(sh >> 3);
            if (one) {
              nonzero = true;
              break;
            }
            store<i32>(out + (<usize>c << 2), 0);
          }
          store<u16>(md + <usize>(P_AT + 2 * ZERO_AT), <u16>pr0);
          store<u8>(md + <usize>(COUNT_AT + ZERO_AT), <u8>cnt0);
          if (c === rowEnd) break;
        }
        if (masked && load<u8>(codes + <usize>c) !== 0) {
          store<i32>(out + (<usize>c << 2), 0);
          left = 0;
          aLeft = 0;
          continue;
        }
        const w = load<u32>(ab + (<usize>c << 2));
        // The activity: 2|left| + the word's part (|left| <= 2^30: no wrap in u32), capped at 0x7fff.
        const b: i32 = 32 - <i32>clz<u32>(min<u32>((aLeft << 1) + (w & 0x7fff), 0x7fff));
        if (b < FLAG_BUCKETS && !nonzero) {
          // Decision: zero flag.
          ctx = md + <usize>b;
          pr = load<u16>(ctx + <usize>b, P_AT + 2 * ZERO_AT);
          cnt = load<u8>(ctx, COUNT_AT + ZERO_AT);
          bound = (range >> 16) * pr;
          one = code >= bound;
          sh = load<u8>(shifts + <usize>cnt);
          code -= select<u32>(bound, 0, one);
          range = select<u32>(range - bound, bound, one);
          store<u16>(ctx + <usize>b, <u16>select<u32>(pr - (pr >> sh), pr + ((65536 - pr) >> sh), one), P_AT + 2 * ZERO_AT);
          store<u8>(ctx, <u8>(cnt + <u32>(cnt < 255)), COUNT_AT + ZERO_AT);
          sh = clz<u32>(range) & 24;
          word = load<u32>(top - <usize>(pos < end ? pos : end));
          range <<= sh;
          code = (code << sh) | ((word >> 1) >> (31 - sh));
          pos += <i32>(sh >> 3);
          if (!one) {
            store<i32>(out + (<usize>c << 2), 0);
            left = 0;
            aLeft = 0;
            continue;
          }
        }
        // The symbol: the s with r E[s] <= code < r E[s + 1] (the escape's interval reaches to range), as the JavaScript
        // finds it. With t = floor(code / r) (an unsigned division: the JavaScript's floor of a binary64 quotient, code < 2^32
        // and r < 2^17), E[s] <= t < E[s + 1] is the same condition (E integers), and as E rises strictly, s is the number of
        // E[1..24] at most t: 24 less those above t, counted four at a time (E < 2^15 and t < 2^15 + 2^6: signed comparisons).
        const base = md + <usize>E_AT + (<usize>(b * (SYMBOLS + 1)) << 2);
        const r: u32 = range >> 15;
        const tv = i32x4.splat(code / r);
        let acc = i32x4.add(i32x4.add(i32x4.gt_s(v128.load(base, 4), tv), i32x4.gt_s(v128.load(base, 20), tv)), i32x4.add(i32x4.gt_s(v128.load(base, 36), tv), i32x4.gt_s(v128.load(base, 52), tv)));
        acc = i32x4.add(acc, i32x4.add(i32x4.gt_s(v128.load(base, 68), tv), i32x4.gt_s(v128.load(base, 84), tv)));
        acc = i32x4.add(acc, i8x16.shuffle(acc, acc, 8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7));
        const s: i32 = ESCAPE + i32x4.extract_lane(acc, 0) + i32x4.extract_lane(acc, 1);
        const lo: u32 = r * load<u32>(base + (<usize>s << 2));
        const hi: u32 = select<u32>(range, r * load<u32>(base + (<usize>s << 2), 4), s === ESCAPE);
        code -= lo;
        range = hi - lo;
        sh = clz<u32>(range) & 24;
        word = load<u32>(top - <usize>(pos < end ? pos : end));
        range <<= sh;
        code = (code << sh) | ((word >> 1) >> (31 - sh));
        pos += <i32>(sh >> 3);
        const fa = md + <usize>F_AT + (<usize>(b * SYMBOLS + s) << 2);
        store<i32>(fa, load<i32>(fa) + INC);
        const la = md + <usize>LEFT_AT + (<usize>b << 2);
        const l1 = load<i32>(la) - 1;
        store<i32>(la, l1);
        due = select<i32>(b, -1, l1 === 0);
        // Symbols 0 and 1 are their own magnitude; 2k + t below the escape is class k: 2 + t, then k - 1 raw bits.
        let kk: i32 = s >> 1;
        let mag: i32 = select<i32>(2 + (s & 1), s, s > 1);
        if (s === ESCAPE) {
          // Decisions: the class above 11 in unary (at most 18 ones), then the bit below the leading one.
          kk = ESC_K;
          let isTop = false;
          for (;;) {
            ctx = md + <usize>(isTop ? TOP_AT + kk - ESC_K : ESC_AT + kk - ESC_K);
            pr = load<u16>(ctx + ctx - md, P_AT);
            cnt = load<u8>(ctx, COUNT_AT);
            bound = (range >> 16) * pr;
            one = code >= bound;
            sh = load<u8>(shifts + <usize>cnt);
            code -= select<u32>(bound, 0, one);
            range = select<u32>(range - bound, bound, one);
            store<u16>(ctx + ctx - md, <u16>select<u32>(pr - (pr >> sh), pr + ((65536 - pr) >> sh), one), P_AT);
            store<u8>(ctx, <u8>(cnt + <u32>(cnt < 255)), COUNT_AT);
            sh = clz<u32>(range) & 24;
            word = load<u32>(top - <usize>(pos < end ? pos : end));
            range <<= sh;
            code = (code << sh) | ((word >> 1) >> (31 - sh));
            pos += <i32>(sh >> 3);
            if (isTop) break;
            if (one && ++kk < 30) continue;
            isTop = true;
          }
          mag = 2 + <i32>one;
        }
        // Decision: sign, taken when s is not 0 (and then without effect on the state: no branch on s).
        const e = s !== 0;
        ctx = <usize>(SIGN_AT + 3 * (<i32>(left > 0) - <i32>(left < 0) + 1) + <i32>((w >> 16) & 3));
        pr = load<u16>(md + (ctx << 1), P_AT);
        cnt = load<u8>(md + ctx, COUNT_AT);
        bound = (range >> 16) * pr;
        one = e & (code >= bound);
        sh = load<u8>(shifts + <usize>cnt);
        code -= select<u32>(bound, 0, one);
        range = select<u32>(select<u32>(range - bound, bound, one), range, e);
        store<u16>(md + (ctx << 1), <u16>select<u32>(select<u32>(pr - (pr >> sh), pr + ((65536 - pr) >> sh), one), pr, e), P_AT);
        store<u8>(md + ctx, <u8>(cnt + <u32>(e & (cnt < 255))), COUNT_AT);
        sh = clz<u32>(range) & 24;
        word = load<u32>(top - <usize>(pos < end ? pos : end));
        range <<= sh;
        code = (code << sh) | ((word >> 1) >> (31 - sh));
        pos += <i32>(sh >> 3);
        // The k - 1 raw bits below the top two (most significant first; the four zero bytes after the section keep every read inside).
        const nb: i32 = kk > 1 ? kk - 1 : 0;
        let bits: u32 = 0;
        if (nb <= 24) {
          bits = ((bswap<u32>(load<u32>(raw + <usize>(bp >>> 3))) << (<u32>bp & 7)) >> 1) >> (31 - <u32>nb);
          bp += nb;
        } else {
          for (let x = 0; x < nb; x++) {
            bits = bits * 2 + ((<u32>load<u8>(raw + <usize>(bp >>> 3)) >> (7 - (<u32>bp & 7))) & 1);
            bp++;
          }
        }
        if (bp > rawBits) {
          failedAt = c;
          finalPos = pos;
          bitPos = bp;
          zeroAfterFlag = zaf;
          return 1;
        }
        mag = (mag << nb) | <i32>bits;
        if (mag > 0x40000000) {
          failedAt = c;
          finalPos = pos;
          bitPos = bp;
          zeroAfterFlag = zaf;
          return 2;
        }
        zaf = select<i32>(c, zaf, (s === 0) & (b < FLAG_BUCKETS) & (zaf < 0));
        left = select<i32>(-mag, mag, one);
        store<i32>(out + (<usize>c << 2), left);
        aLeft = <u32>mag;
        if (due >= 0) {
          c++;
          break;
        }
      }
      if (due < 0) break;
      rebuild(md, due);
      due = -1;
    }
    if (i + 1 < m) rowWords(out + (<usize>row << 2), n, above);
  }
  finalPos = pos;
  bitPos = bp;
  zeroAfterFlag = zaf;
  return 0;
}
