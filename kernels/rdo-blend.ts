/**
 * The residual search's walk with the blend predictor (src/codec/rdo.ts,
 * RdoWalk.run with the blend: blendWalk of src/codec/reconstruct.ts with
 * RdoWalk.settle choosing each code knowing its prediction, the walk
 * stopped as soon as a sum passes its limit). The blend's arithmetic is
 * kernels/blend-encode.ts's (i64 predictions, i32 activities and weights,
 * the same floor division); each cell's code is chosen as kernels/rdo.ts
 * chooses it, so every code, difference and sum is the JavaScript's.
 *
 * Memory (byte addresses): as kernels/rdo.ts's walk (grid, codes, q, d,
 * table, out), and weight (the blend weight table, i32), above and
 * below (5 n i32 each), errs (5 n i32, after 5 more cleared here).
 */
import { cap, ld, st } from './blend-parts';
import { LIMIT, LIMIT_I, roundJs, settleCode, settledBits } from './rdo-cell';

/** The walk's sums and the last code settled (a settle gives a status). */
let se: f64 = 0;
let bits: f64 = 0;
let code: i64 = 0;

/**
 * RdoWalk.settle of cell c given its prediction p, and the walk's limits
 * after it: 1 with the code in `code` (and q, d, the sums updated), 0
 * where the JavaScript's settle gives NaN, -1 for a NaN value (the caller
 * walks in JavaScript).
 */
@inline
function settle(grid: usize, codes: usize, q: usize, d: usize, table: usize, c: i32, p: i64, step: f64, w: f64, seLimit: f64, bitsLimit: f64): i32 {
  if (load<u8>(codes + <usize>c) !== 0) {
    if (p > LIMIT_I || p < -LIMIT_I) return 0;
    st(q, c, <i32>p);
    st(d, c, 0);
    code = p;
    return 1;
  }
  const x = load<f64>(grid + (<usize>c << 3));
  if (x !== x) return -1;
  const nearF = roundJs(x);
  if (!(Math.abs(nearF) <= LIMIT + 1)) return 0;
  const v = settleCode(table, x, nearF, p, w);
  const dv = v - p;
  // The code is an integer within LIMIT + 2: exact in binary64.
  const vF = <f64>v;
  const cellBits = settledBits;
  if (v > LIMIT_I || v < -LIMIT_I || dv > LIMIT_I || dv < -LIMIT_I) return 0;
  st(d, c, <i32>dv);
  bits += cellBits;
  se += (x - vF) * (x - vF) * step * step;
  if (se > seLimit || bits > bitsLimit) return 0;
  st(q, c, <i32>v);
  code = v;
  return 1;
}

/** {@link settle} not inlined, for the first row and column (the module stays under 4 KiB: src/wasm/kernels.ts says why). */
function settleEdge(grid: usize, codes: usize, q: usize, d: usize, table: usize, c: i32, p: i64, step: f64, w: f64, seLimit: f64, bitsLimit: f64): i32 {
  return settle(grid, codes, q, d, table, c, p, step, w, seLimit, bitsLimit);
}

/** floor(num / total) for total > 0, exactly (see kernels/blend-encode.ts, floorDiv). */
@inline
function floorDiv(num: i64, total: i32): i64 {
  let p = <i64>Math.floor(<f64>num / <f64>total);
  if (p * <i64>total > num) p--;
  else if ((p + 1) * <i64>total <= num) p++;
  return p;
}

/** One walk with the blend (see the module's comment): 1 when every cell is walked within the limits (the sums in `out`), 0 where the JavaScript returns false, -1 where a cell's scaled value is NaN. */
export function rdoBlendWalk(grid: usize, codes: usize, q: usize, d: usize, table: usize, m: i32, n: i32, step: f64, w: f64, seLimit: f64, bitsLimit: f64, keep: f64, restSe: usize, restBits: usize, out: usize, weight: usize, above0: usize, below0: usize, errs: usize): i32 {
  if (keep * load<f64>(restSe) > seLimit || keep * load<f64>(restBits) > bitsLimit) return 0;
  se = 0;
  bits = 0;
  memory.fill(errs - 20, 0, 20);
  let above = above0;
  let below = below0;
  memory.fill(above, 0, <usize>(5 * n) << 2);
  for (let i = 0; i < m; i++) {
    const row = i * n;
    let s = settleEdge(grid, codes, q, d, table, row, i === 0 ? 0 : <i64>ld(q, row - n), step, w, seLimit, bitsLimit);
    if (s <= 0) return s;
    if (i === 0) {
      for (let c = 1; c < n; c++) {
        s = settleEdge(grid, codes, q, d, table, c, <i64>ld(q, c - 1), step, w, seLimit, bitsLimit);
        if (s <= 0) return s;
      }
      continue;
    }
    memory.fill(errs, 0, 20);
    let wl = <i64>ld(q, row);
    let ww = wl;
    let nw = <i64>ld(q, row - n);
    let nn = <i64>ld(q, row - n + 1);
    for (let j = 1; j < n; j++) {
      const c = row + j;
      const last = j + 1 === n;
      const ne = last ? nn : <i64>ld(q, c - n + 1);
      const p0 = wl;
      const p1 = nn;
      const p2 = wl + nn - nw;
      const p3 = nn + ne - (i >= 2 && !last ? <i64>ld(q, c - 2 * n + 1) : ne);
      const p4 = 2 * wl - ww;
      const u = 5 * j;
      const w0 = ld(weight, ld(errs, u - 5) + ld(above, u));
      const w1 = ld(weight, ld(errs, u - 4) + ld(above, u + 1));
      const w2 = ld(weight, ld(errs, u - 3) + ld(above, u + 2));
      const w3 = ld(weight, ld(errs, u - 2) + ld(above, u + 3));
      const w4 = ld(weight, ld(errs, u - 1) + ld(above, u + 4));
      const total = w0 + w1 + w2 + w3 + w4;
      const num = <i64>w0 * p0 + <i64>w1 * p1 + <i64>w2 * p2 + <i64>w3 * p3 + <i64>w4 * p4 + <i64>(total >> 1);
      s = settle(grid, codes, q, d, table, c, floorDiv(num, total), step, w, seLimit, bitsLimit);
      if (s <= 0) return s;
      const v = code;
      st(errs, u, cap(v - p0));
      st(errs, u + 1, cap(v - p1));
      st(errs, u + 2, cap(v - p2));
      st(errs, u + 3, cap(v - p3));
      st(errs, u + 4, cap(v - p4));
      ww = wl;
      wl = v;
      nw = nn;
      nn = ne;
    }
    // The next row's sums (kernels/blend-encode.ts): at column j, the errors at j - 1, j and j + 1; in the last column up-right is up.
    const lastAt = 5 * (n - 1);
    let t = 0;
    for (; t + 4 <= lastAt; t += 4) {
      const at = errs + (<usize>t << 2);
      v128.store(below + (<usize>t << 2), i32x4.add(i32x4.add(v128.load(at - 20), v128.load(at)), v128.load(at + 20)));
    }
    for (; t < lastAt; t++) st(below, t, ld(errs, t - 5) + ld(errs, t) + ld(errs, t + 5));
    if (n > 1) for (let t = lastAt; t < lastAt + 5; t++) st(below, t, ld(errs, t - 5) + 2 * ld(errs, t));
    else memory.fill(below, 0, 20);
    const swap = above;
    above = below;
    below = swap;
  }
  store<f64>(out, se);
  store<f64>(out + 8, bits);
  return 1;
}
