/**
 * The pointwise encoder's check of a candidate (src/codec/tile-encode.ts,
 * correct and settleCodes), a band of rows at a time: each row's low-rank
 * part ({@link lowRank}, into a row of scratch that stays in cache), the
 * field layer's term added where there is one, then each valid cell's code
 * v = roundHalfUp((o - b) / step) (0 beyond +-2^30), the check of its
 * reconstruction b + v step (rounded to binary32 for an f32 tile) against
 * e, and the row's part of the rough bits of the codes and of the five
 * plain predictors' differences (src/codec/reconstruct.ts,
 * predictorBitsRow). Every operation is the JavaScript's, in its order, so
 * every code, exception and sum is the same.
 *
 * Memory (byte addresses): l (rows x r, binary64), w (r x n), `row` (n
 * binary64 of scratch), `layer` (rows x n binary64, or 0), `orig` (rows x
 * n, binary32 when f32 is not 0, else binary64), `codes` (rows x n class
 * codes, u8, or 0: every cell valid), `q` (rows x n i32 out; the n i32
 * before it hold the row above the band, and hold the band's last row on
 * return), `exc` (out: the failing cells' indices, counted from the tile's
 * first cell, in increasing order), `state` (in and out, carried from band
 * to band: see the offsets below).
 */
import { lowRank } from './lowrank';

/** Offsets in `state`: the five predictors' bit sums (binary64, Lorenzo, Left, Up, Average, Median), then the rough bits of the codes (binary64). */
const BITS = 40;
/** i32: the predictors whose differences passed the limit (bit k for sum k). */
const OVER = 48;
/** i32: 1 while the predictor sums are kept (a tile without missing cells whose edge differences stayed within the limit), else 0. */
const SUMS_ON = 52;
/** i32: the OR of |code| over the row above. */
const ABOVE = 56;
/** i32: the OR of |code| over every row so far (not 0: a code is kept). */
const ANY = 60;
/** Binary64: the non-zero differences of the five predictors (as the sums), then the non-zero codes. */
const NONZERO = 64;
const NONZERO_CODES = 104;

/** The codes' limit (src/codec/section.ts, MAX_INT). */
const LIMIT: i32 = 0x40000000;
/**
 * A row pair whose codes are all below this takes the SIMD sums: every
 * difference is then below 2^24 in magnitude, exact in binary32, whose
 * exponent gives its bit length.
 */
const SMALL: i32 = 1 << 22;

export function settleBand(l: usize, w: usize, r: i32, n: i32, rows: i32, i0: i32, center: f64, layer: usize, orig: usize, f32: i32, codes: usize, step: f64, e: f64, q: usize, exc: usize, state: usize, row: usize): i32 {
  let count = 0;
  let above = load<i32>(state, ABOVE);
  let any = load<i32>(state, ANY);
  let bits = load<f64>(state, BITS);
  let nonzero = load<f64>(state, NONZERO_CODES);
  const rowBytes = <usize>n << 2;
  for (let i = 0; i < rows; i++) {
    const at = <usize>(i * n);
    // Rank 0 too: no product, each output 0 + center (lowRank's sums start at +0).
    lowRank(l + (<usize>(i * r) << 3), w, 1, n, r, center, row);
    if (layer !== 0) {
      const lr = layer + (at << 3);
      let j = 0;
      for (; j + 2 <= n; j += 2) v128.store(row + (<usize>j << 3), f64x2.add(v128.load(row + (<usize>j << 3)), v128.load(lr + (<usize>j << 3))));
      if (j < n) store<f64>(row + (<usize>j << 3), load<f64>(row + (<usize>j << 3)) + load<f64>(lr + (<usize>j << 3)));
    }
    const qr = q + (at << 2);
    const done = settleRow(row, orig, f32, codes, at, n, step, e, qr, exc + (<usize>count << 2), (i0 + i) * n);
    count += rowExceptions;
    bits += <f64>(done & 0xffffffff);
    nonzero += <f64>rowNonzero;
    const most = <i32>(done >>> 32);
    any |= most;
    if (load<i32>(state, SUMS_ON) !== 0) {
      if (i0 + i > 0 && (most | above) < SMALL) smallRow(qr, n, state);
      else if (!plainRow(qr, n, i0 + i === 0, state, 0)) store<i32>(state, 0, SUMS_ON);
    }
    above = most;
  }
  if (rows > 0) memory.copy(q - rowBytes, q + <usize>(rows - 1) * rowBytes, rowBytes);
  store<i32>(state, above, ABOVE);
  store<i32>(state, any, ANY);
  store<f64>(state, bits, BITS);
  store<f64>(state, nonzero, NONZERO_CODES);
  return count;
}

/** The exceptions and the non-zero codes {@link settleRow} found (its result holds its bits and OR). */
let rowExceptions: i32 = 0;
let rowNonzero: i32 = 0;

/**
 * One row: codes into qr, failing cells (index base + j) into exc; returns
 * the row's rough bits in the low 32 bits and the OR of |code| in the high.
 */
function settleRow(row: usize, orig: usize, f32: i32, codes: usize, at: usize, n: i32, step: f64, e: f64, qr: usize, exc: usize, base: i32): u64 {
  const sv = f64x2.splat(step);
  const ev = f64x2.splat(e);
  const half = f64x2.splat(0.5);
  const one = f64x2.splat(1.0);
  const lim = f64x2.splat(<f64>LIMIT);
  const magic = f64x2.splat(6755399441055744.0);
  let bitsV = i32x4.splat(0);
  let mostV = i32x4.splat(0);
  let nonzeroV = i32x4.splat(0);
  let count = 0;
  let j = 0;
  const iota = i32x4(0, 1, 2, 3);
  const nv = i32x4.splat(n);
  // Four cells at a time; in the last four, lanes past the row's end are not valid (their loads read padding or the next row, their codes go where the next row's will).
  for (; j < n; j += 4) {
    const c = at + <usize>j;
    let o0: v128;
    let o1: v128;
    if (f32 !== 0) {
      o0 = f64x2.promote_low_f32x4(v128.load64_zero(orig + (c << 2)));
      o1 = f64x2.promote_low_f32x4(v128.load64_zero(orig + (c << 2) + 8));
    } else {
      o0 = v128.load(orig + (c << 3));
      o1 = v128.load(orig + (c << 3), 16);
    }
    const b0 = v128.load(row + (<usize>j << 3));
    const b1 = v128.load(row + (<usize>j << 3), 16);
    // roundHalfUp: floor(x + 0.5), less 1 where that minus 0.5 is above x (r - 1 there, elsewhere r - (+0),
    // which is r itself, -0 and NaN included); 0 where |r| passes LIMIT (and for NaN).
    const x0 = f64x2.div(f64x2.sub(o0, b0), sv);
    const x1 = f64x2.div(f64x2.sub(o1, b1), sv);
    let r0 = f64x2.floor(f64x2.add(x0, half));
    let r1 = f64x2.floor(f64x2.add(x1, half));
    r0 = f64x2.sub(r0, v128.and(f64x2.gt(f64x2.sub(r0, half), x0), one));
    r1 = f64x2.sub(r1, v128.and(f64x2.gt(f64x2.sub(r1, half), x1), one));
    r0 = v128.and(r0, f64x2.le(f64x2.abs(r0), lim));
    r1 = v128.and(r1, f64x2.le(f64x2.abs(r1), lim));
    // The codes as i32: an integer within +-2^30 plus 1.5 x 2^52 is exact, and the low 32 bits of its
    // significand are the integer's two's complement.
    let v = i32x4.shuffle(f64x2.add(r0, magic), f64x2.add(r1, magic), 0, 2, 4, 6);
    // Valid cells (in the row, and of class 0 where there are class codes); the others get code 0 and no check.
    let valid = i32x4.lt_s(i32x4.add(iota, i32x4.splat(j)), nv);
    if (codes !== 0) valid = v128.and(valid, i32x4.eq(i32x4.extend_low_i16x8_u(i16x8.extend_low_i8x16_u(v128.load32_zero(codes + c))), i32x4.splat(0)));
    v = v128.and(v, valid);
    v128.store(qr + (<usize>j << 2), v);
    const a = i32x4.abs(v);
    mostV = v128.or(mostV, a);
    nonzeroV = i32x4.sub(nonzeroV, i32x4.ne(a, i32x4.splat(0)));
    bitsV = i32x4.add(bitsV, bitLength(v128.andnot(a, i32x4.shr_u(a, 1))));
    // The check: b + v step, rounded to binary32 for an f32 tile, within e of o (r is v as binary64, +0 for 0;
    // a cell that is not valid has code 0 whatever r is, and no check).
    let s0 = f64x2.add(b0, f64x2.mul(r0, sv));
    let s1 = f64x2.add(b1, f64x2.mul(r1, sv));
    if (f32 !== 0) {
      s0 = f64x2.promote_low_f32x4(f32x4.demote_f64x2_zero(s0));
      s1 = f64x2.promote_low_f32x4(f32x4.demote_f64x2_zero(s1));
    }
    const ok0 = f64x2.le(f64x2.abs(f64x2.sub(o0, s0)), ev);
    const ok1 = f64x2.le(f64x2.abs(f64x2.sub(o1, s1)), ev);
    const ok = v128.or(i32x4.shuffle(ok0, ok1, 0, 2, 4, 6), v128.not(valid));
    if (!i32x4.all_true(ok)) {
      if (i32x4.extract_lane(ok, 0) === 0) count = push(exc, count, base + j);
      if (i32x4.extract_lane(ok, 1) === 0) count = push(exc, count, base + j + 1);
      if (i32x4.extract_lane(ok, 2) === 0) count = push(exc, count, base + j + 2);
      if (i32x4.extract_lane(ok, 3) === 0) count = push(exc, count, base + j + 3);
    }
  }
  const bits = lanes(bitsV);
  const most = i32x4.extract_lane(mostV, 0) | i32x4.extract_lane(mostV, 1) | i32x4.extract_lane(mostV, 2) | i32x4.extract_lane(mostV, 3);
  rowExceptions = count;
  rowNonzero = lanes(nonzeroV);
  return (<u64>(<u32>most) << 32) | <u64>(<u32>bits);
}

/** exc[count] = cell; count + 1. */
// @ts-ignore: decorator
@inline
function push(exc: usize, count: i32, cell: i32): i32 {
  store<i32>(exc + (<usize>count << 2), cell);
  return count + 1;
}

/**
 * Bit lengths of four magnitudes below 2^31 whose bit under the top one is
 * clear (so that binary32 rounding cannot carry into the next power of
 * two): the binary32 exponent field less 126, 0 for 0 (a saturating
 * subtraction on the low 16 bits of each lane; the high 16 are 0).
 */
// @ts-ignore: decorator
@inline
function bitLength(a: v128): v128 {
  return i16x8.sub_sat_u(exponentField(a), i32x4.splat(126));
}

/** The binary32 exponent fields of four magnitudes as {@link bitLength} takes them: 0 for 0, else 126 + the bit length. */
// @ts-ignore: decorator
@inline
function exponentField(a: v128): v128 {
  return i32x4.shr_u(f32x4.convert_i32x4_s(a), 23);
}

/** Adds a row's five predictor totals into the five binary64 sums at `at`. */
function addSums(at: usize, t1: i32, t2: i32, t3: i32, t4: i32, t5: i32): void {
  store<f64>(at, load<f64>(at) + <f64>t1);
  store<f64>(at, load<f64>(at, 8) + <f64>t2, 8);
  store<f64>(at, load<f64>(at, 16) + <f64>t3, 16);
  store<f64>(at, load<f64>(at, 24) + <f64>t4, 24);
  store<f64>(at, load<f64>(at, 32) + <f64>t5, 32);
}

// @ts-ignore: decorator
@inline
function lanes(v: v128): i32 {
  return i32x4.extract_lane(v, 0) + i32x4.extract_lane(v, 1) + i32x4.extract_lane(v, 2) + i32x4.extract_lane(v, 3);
}

/**
 * predictorBitsRow of a row that is not the tile's first, whose codes and
 * the row above's are all below {@link SMALL} in magnitude (so no
 * difference passes the limit): four cells at a time, the same
 * differences as smallBitsRow, each sum's total the same integer; and the
 * count of each predictor's non-zero differences.
 */
function smallRow(qr: usize, n: i32, state: usize): void {
  const up = qr - (<usize>n << 2);
  const e0 = load<i32>(qr) - load<i32>(up);
  const edge = 32 - clz(e0 < 0 ? -e0 : e0);
  let k1 = i32x4.splat(0);
  let k2 = i32x4.splat(0);
  let k3 = i32x4.splat(0);
  let k4 = i32x4.splat(0);
  let k5 = i32x4.splat(0);
  let z1 = i32x4.splat(0);
  let z2 = i32x4.splat(0);
  let z3 = i32x4.splat(0);
  let z4 = i32x4.splat(0);
  let z5 = i32x4.splat(0);
  const zero = i32x4.splat(0);
  let j = 1;
  for (; j + 4 <= n; j += 4) {
    const o = <usize>j << 2;
    const x = v128.load(qr + o);
    const a = v128.load(qr + o - 4);
    const b = v128.load(up + o);
    const d = v128.load(up + o - 4);
    const s = i32x4.add(a, b);
    const lo = i32x4.min_s(a, b);
    const hi = i32x4.max_s(a, b);
    const lorenzo = i32x4.sub(s, d);
    const median = v128.bitselect(lo, v128.bitselect(hi, lorenzo, i32x4.le_s(d, lo)), i32x4.ge_s(d, hi));
    // Each difference's binary32 exponent field added (0 for 0, else 126 + its bit length), and its
    // lane's count less 1 (an all-ones mask) where it is not 0: the bits are the fields less 126 a count.
    const v1 = i32x4.sub(x, lorenzo);
    const v2 = i32x4.sub(x, a);
    const v3 = i32x4.sub(x, b);
    const v4 = i32x4.sub(x, i32x4.shr_s(s, 1));
    const v5 = i32x4.sub(x, median);
    k1 = i32x4.add(k1, exponentField(i32x4.abs(v1)));
    k2 = i32x4.add(k2, exponentField(i32x4.abs(v2)));
    k3 = i32x4.add(k3, exponentField(i32x4.abs(v3)));
    k4 = i32x4.add(k4, exponentField(i32x4.abs(v4)));
    k5 = i32x4.add(k5, exponentField(i32x4.abs(v5)));
    z1 = i32x4.sub(z1, i32x4.ne(v1, zero));
    z2 = i32x4.sub(z2, i32x4.ne(v2, zero));
    z3 = i32x4.sub(z3, i32x4.ne(v3, zero));
    z4 = i32x4.sub(z4, i32x4.ne(v4, zero));
    z5 = i32x4.sub(z5, i32x4.ne(v5, zero));
  }
  // The first column's difference, the same for every predictor.
  const ez = e0 !== 0 ? 1 : 0;
  const n1 = lanes(z1);
  const n2 = lanes(z2);
  const n3 = lanes(z3);
  const n4 = lanes(z4);
  const n5 = lanes(z5);
  addSums(state, edge + lanes(k1) - 126 * n1, edge + lanes(k2) - 126 * n2, edge + lanes(k3) - 126 * n3, edge + lanes(k4) - 126 * n4, edge + lanes(k5) - 126 * n5);
  addSums(state + NONZERO, ez + n1, ez + n2, ez + n3, ez + n4, ez + n5);
  // The last cells (fewer than four).
  plainRow(qr, n, false, state, j);
}

/** 32 less the leading zeros of |v| taken modulo 2^32, as Math.clz32 (ECMA-262 ToUint32, from memory) of a difference predictorBitsRow forms exactly in binary64. */
// @ts-ignore: decorator
@inline
function bits64(v: i64): i32 {
  return 32 - clz(<i32>(v < 0 ? -v : v));
}

/**
 * predictorBitsRow's checked path for any row (the tile's first when
 * `first`) from column `from`: differences in 64-bit integers, exact as
 * the JavaScript's binary64 ones are; false when an edge difference passes
 * the limit. The bit sums, the non-zero counts and the flags are added
 * into `state`'s.
 */
function plainRow(qr: usize, n: i32, first: bool, state: usize, from: i32): bool {
  const up = qr - (<usize>n << 2);
  let t1 = 0;
  let t2 = 0;
  let t3 = 0;
  let t4 = 0;
  let t5 = 0;
  let n1 = 0;
  let n2 = 0;
  let n3 = 0;
  let n4 = 0;
  let n5 = 0;
  let over = 0;
  for (let j = from; j < n; j++) {
    const o = <usize>j << 2;
    const x = <i64>load<i32>(qr + o);
    if (first || j === 0) {
      const v = x - (first ? (j === 0 ? 0 : <i64>load<i32>(qr + o - 4)) : <i64>load<i32>(up + o));
      if (v > LIMIT || v < -LIMIT) return false;
      const b = bits64(v);
      const z = <i32>(v !== 0);
      t1 += b;
      t2 += b;
      t3 += b;
      t4 += b;
      t5 += b;
      n1 += z;
      n2 += z;
      n3 += z;
      n4 += z;
      n5 += z;
      continue;
    }
    const a = <i64>load<i32>(qr + o - 4);
    const b = <i64>load<i32>(up + o);
    const d = <i64>load<i32>(up + o - 4);
    const lo = a < b ? a : b;
    const hi = a < b ? b : a;
    const v1 = x - (a + b - d);
    const v2 = x - a;
    const v3 = x - b;
    const v4 = x - ((a + b) >> 1);
    const v5 = x - (d >= hi ? lo : d <= lo ? hi : a + b - d);
    t1 += bits64(v1);
    t2 += bits64(v2);
    t3 += bits64(v3);
    t4 += bits64(v4);
    t5 += bits64(v5);
    n1 += <i32>(v1 !== 0);
    n2 += <i32>(v2 !== 0);
    n3 += <i32>(v3 !== 0);
    n4 += <i32>(v4 !== 0);
    n5 += <i32>(v5 !== 0);
    if (v1 > LIMIT || v1 < -LIMIT) over |= 1;
    if (v2 > LIMIT || v2 < -LIMIT) over |= 2;
    if (v3 > LIMIT || v3 < -LIMIT) over |= 4;
    if (v4 > LIMIT || v4 < -LIMIT) over |= 8;
    if (v5 > LIMIT || v5 < -LIMIT) over |= 16;
  }
  addSums(state, t1, t2, t3, t4, t5);
  addSums(state + NONZERO, n1, n2, n3, n4, n5);
  store<i32>(state, load<i32>(state, OVER) | over, OVER);
  return true;
}
