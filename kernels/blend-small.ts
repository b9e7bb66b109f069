/**
 * The encoder's blend walk (kernels/blend-encode.ts) without a class map,
 * for a grid whose every code is within 2^28 in magnitude, four cells at a
 * time: every code is known, so each row's parts and their errors are
 * formed first (i32x4: every part is within 3 x 2^28, every difference
 * from a code within 2^30), then the weights (a table lookup a part and
 * cell), then the predictions in binary64 (f64x2: each w_k P_k is below
 * 2^46 and their sum below 2^49, exact, as the JavaScript's doubles hold
 * them; floor of the quotient is exact, see floorDiv in
 * kernels/blend-encode.ts), then the next row's activity sums. The same
 * differences, and the same stop (0 returned) at a difference beyond
 * +-limit, as the walk; 2 returned (the caller walks) when a code passes
 * 2^28.
 *
 * Memory (byte addresses): q (m x n i32, left as it is), d (m x n i32),
 * weight (the blend weight table), and `scratch`: 25 rows of n + 8 i32
 * (each used from its entry 4), five each of the row above's activity
 * sums, the next row's, the row's errors, its parts and its weights, part
 * by part; cleared here.
 */
import { CAP, ld, st } from './blend-parts';
import { small } from './predict-encode';

const CAP32: i32 = <i32>CAP;

/** Part k's row of `kind` (0 above, 1 below, 2 errors, 3 parts, 4 weights). */
@inline
function rowOf(scratch: usize, stride: i32, kind: i32, k: i32): usize {
  return scratch + (<usize>((kind * 5 + k) * stride + 4) << 2);
}

/** One cell's parts and errors (the scalar columns: j = 1, where two-left is left, and the last ones). */
@inline
function cellParts(row: usize, up: usize, up2: usize, i: i32, j: i32, n: i32, E: usize, P: usize, stride: i32): void {
  const last = j + 1 === n;
  const w = ld(row, j - 1);
  const nn = ld(up, j);
  const ne = last ? nn : ld(up, j + 1);
  const x = ld(row, j);
  const p0 = w;
  const p1 = nn;
  const p2 = w + nn - ld(up, j - 1);
  const p3 = nn + ne - (i >= 2 && !last ? ld(up2, j + 1) : ne);
  const p4 = 2 * w - (j >= 2 ? ld(row, j - 2) : w);
  const s = stride << 2;
  st(P, j, p0);
  st(P + s, j, p1);
  st(P + 2 * s, j, p2);
  st(P + 3 * s, j, p3);
  st(P + 4 * s, j, p4);
  st(E, j, min(abs(x - p0), CAP32));
  st(E + s, j, min(abs(x - p1), CAP32));
  st(E + 2 * s, j, min(abs(x - p2), CAP32));
  st(E + 3 * s, j, min(abs(x - p3), CAP32));
  st(E + 4 * s, j, min(abs(x - p4), CAP32));
}

export function blendEncodeSmall(q: usize, d: usize, m: i32, n: i32, limit: i32, weight: usize, scratch: usize): i32 {
  if (!small(q, m * n)) return 2;
  const stride = n + 8;
  const s = <usize>stride << 2;
  memory.fill(scratch, 0, <usize>(25 * stride) << 2);
  let A = rowOf(scratch, stride, 0, 0);
  let B = rowOf(scratch, stride, 1, 0);
  const E = rowOf(scratch, stride, 2, 0);
  const P = rowOf(scratch, stride, 3, 0);
  const Wt = rowOf(scratch, stride, 4, 0);
  const limF = <f64>limit;
  const limV = f64x2.splat(limF);
  const cap = i32x4.splat(CAP32);
  // The first row: differences from the left (0 before the first cell); its errors are 0.
  let prev = 0;
  for (let j = 0; j < n; j++) {
    const x = ld(q, j);
    const v = x - prev;
    if (<f64>abs(v) > limF) return 0;
    st(d, j, v);
    prev = x;
  }
  for (let i = 1; i < m; i++) {
    const row = q + (<usize>(i * n) << 2);
    const up = row - (<usize>n << 2);
    const up2 = up - (<usize>n << 2);
    const out = d + (<usize>(i * n) << 2);
    {
      const v = ld(row, 0) - ld(up, 0);
      if (<f64>abs(v) > limF) return 0;
      st(out, 0, v);
    }
    if (n === 1) continue;
    // Parts and errors: column 1 and the last columns one by one, four at a time between.
    cellParts(row, up, up2, i, 1, n, E, P, stride);
    let j = 2;
    for (; j + 4 <= n - 1; j += 4) {
      const a = <usize>j << 2;
      const w = v128.load(row + a - 4);
      const nn = v128.load(up + a);
      const ne = v128.load(up + a + 4);
      const x = v128.load(row + a);
      const p2 = i32x4.sub(i32x4.add(w, nn), v128.load(up + a - 4));
      const p3 = i32x4.sub(i32x4.add(nn, ne), i >= 2 ? v128.load(up2 + a + 4) : ne);
      const p4 = i32x4.sub(i32x4.add(w, w), v128.load(row + a - 8));
      v128.store(P + a, w);
      v128.store(P + s + a, nn);
      v128.store(P + 2 * s + a, p2);
      v128.store(P + 3 * s + a, p3);
      v128.store(P + 4 * s + a, p4);
      v128.store(E + a, i32x4.min_s(i32x4.abs(i32x4.sub(x, w)), cap));
      v128.store(E + s + a, i32x4.min_s(i32x4.abs(i32x4.sub(x, nn)), cap));
      v128.store(E + 2 * s + a, i32x4.min_s(i32x4.abs(i32x4.sub(x, p2)), cap));
      v128.store(E + 3 * s + a, i32x4.min_s(i32x4.abs(i32x4.sub(x, p3)), cap));
      v128.store(E + 4 * s + a, i32x4.min_s(i32x4.abs(i32x4.sub(x, p4)), cap));
    }
    for (; j < n; j++) cellParts(row, up, up2, i, j, n, E, P, stride);
    // Weights: part k's activity is its error at the left cell plus the row above's sum.
    for (let k = 0; k < 5; k++) {
      const e = E + <usize>k * s;
      const ab = A + <usize>k * s;
      const wt = Wt + <usize>k * s;
      for (let c = 1; c < n; c++) st(wt, c, ld(weight, ld(e, c - 1) + ld(ab, c)));
    }
    // Predictions and differences, two cells at a time in binary64.
    j = 1;
    for (; j + 2 <= n; j += 2) {
      const a = <usize>j << 2;
      const w0 = f64x2.convert_low_i32x4_s(v128.load64_zero(Wt + a));
      const w1 = f64x2.convert_low_i32x4_s(v128.load64_zero(Wt + s + a));
      const w2 = f64x2.convert_low_i32x4_s(v128.load64_zero(Wt + 2 * s + a));
      const w3 = f64x2.convert_low_i32x4_s(v128.load64_zero(Wt + 3 * s + a));
      const w4 = f64x2.convert_low_i32x4_s(v128.load64_zero(Wt + 4 * s + a));
      const total = f64x2.add(f64x2.add(f64x2.add(f64x2.add(w0, w1), w2), w3), w4);
      // floor(total / 2): total is a whole number below 2^19.
      const half = f64x2.floor(f64x2.mul(total, f64x2.splat(0.5)));
      let num = f64x2.mul(w0, f64x2.convert_low_i32x4_s(v128.load64_zero(P + a)));
      num = f64x2.add(num, f64x2.mul(w1, f64x2.convert_low_i32x4_s(v128.load64_zero(P + s + a))));
      num = f64x2.add(num, f64x2.mul(w2, f64x2.convert_low_i32x4_s(v128.load64_zero(P + 2 * s + a))));
      num = f64x2.add(num, f64x2.mul(w3, f64x2.convert_low_i32x4_s(v128.load64_zero(P + 3 * s + a))));
      num = f64x2.add(num, f64x2.mul(w4, f64x2.convert_low_i32x4_s(v128.load64_zero(P + 4 * s + a))));
      num = f64x2.add(num, half);
      const x = f64x2.sub(f64x2.convert_low_i32x4_s(v128.load64_zero(row + a)), f64x2.floor(f64x2.div(num, total)));
      if (v128.any_true(f64x2.gt(f64x2.abs(x), limV))) return 0;
      v128.store64_lane(out + a, i32x4.trunc_sat_f64x2_s_zero(x), 0);
    }
    for (; j < n; j++) {
      const w0 = <f64>ld(Wt, j);
      const w1 = <f64>ld(Wt + s, j);
      const w2 = <f64>ld(Wt + 2 * s, j);
      const w3 = <f64>ld(Wt + 3 * s, j);
      const w4 = <f64>ld(Wt + 4 * s, j);
      const total = w0 + w1 + w2 + w3 + w4;
      const num = w0 * <f64>ld(P, j) + w1 * <f64>ld(P + s, j) + w2 * <f64>ld(P + 2 * s, j) + w3 * <f64>ld(P + 3 * s, j) + w4 * <f64>ld(P + 4 * s, j) + Math.floor(total * 0.5);
      const x = <f64>ld(row, j) - Math.floor(num / total);
      if (Math.abs(x) > limF) return 0;
      st(out, j, <i32>x);
    }
    // The next row's sums: at column j, the errors at j - 1, j and j + 1 (none before column 1), up-right being up in the last column.
    for (let k = 0; k < 5; k++) {
      const e = E + <usize>k * s;
      const b = B + <usize>k * s;
      let c = 0;
      for (; c + 4 <= n - 1; c += 4) {
        const a = <usize>c << 2;
        v128.store(b + a, i32x4.add(i32x4.add(v128.load(e + a - 4), v128.load(e + a)), v128.load(e + a + 4)));
      }
      for (; c < n - 1; c++) st(b, c, ld(e, c - 1) + ld(e, c) + ld(e, c + 1));
      st(b, n - 1, ld(e, n - 2) + 2 * ld(e, n - 1));
    }
    const swap = A;
    A = B;
    B = swap;
  }
  return 1;
}
