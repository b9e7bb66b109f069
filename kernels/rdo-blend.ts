/**
 * The residual search's walks with the blend predictor (src/codec/rdo.ts,
 * RdoWalk.run with the blend: blendWalk of src/codec/reconstruct.ts with
 * RdoWalk.settle choosing each code knowing its prediction, the walk
 * stopped as soon as a sum passes its limit), up to four in one pass over
 * the tile at one step, a rate weight each (a lane each: their serial
 * chains, through each cell's code, its errors and the next cell's
 * weights and prediction, overlap, as kernels/rdo-lanes.ts's do). The
 * blend's arithmetic is kernels/blend-encode.ts's (i64 predictions, i32
 * activities and weights, the same floor division); each cell's code is
 * chosen as kernels/rdo.ts chooses it, so every code, difference and sum
 * is the JavaScript's.
 *
 * A lane stops where a sum passes its limit, cell by cell (the sums only
 * grow, so under a tighter rough-bits limit L the walk would have given
 * false exactly when its bits, or the floor's before the first row, pass
 * L: src/wasm/rdo.ts reads the lanes so).
 *
 * Memory (byte addresses): grid, codes and table as kernels/rdo.ts's walk;
 * q and d (m x n i32 a lane: the lane's codes, and its differences, 0 at
 * cells that are not Valid, out); weights (a binary64 a lane); weight (the
 * blend weight table, i32); parts (`partBytes` a lane: 32 bytes cleared
 * here, then the lane's errors, the sums of the row above and this one's,
 * 5 n i32 each at 32, 32 + 20 n and 32 + 40 n); state (48 bytes a lane,
 * out: status, i32 at 0, as kernels/rdo-lanes.ts's; squared error at 16
 * and rough bits at 24, binary64).
 */
import { cap, ld, st } from './blend-parts';
import { LIMIT, LIMIT_I, roundJs, settleCode, settledBits } from './rdo-cell';

/** Bytes of a lane's state. */
const STATE: usize = 48;

/**
 * RdoWalk.settle of cell c of the lane at state s (codes q, differences d)
 * given its prediction p, and the lane's limits after it: the code, with
 * q, d and the sums updated; where the lane stops (status 0 where the
 * JavaScript's settle gives NaN or a limit is passed, -1 for a NaN value)
 * LIMIT_I + 1, which no code reaches.
 */
@inline
function settle(s: usize, q: usize, d: usize, table: usize, c: i32, valid: bool, x: f64, nearF: f64, p: i64, step: f64, w: f64, seLimit: f64, bitsLimit: f64): i64 {
  if (!valid) {
    if (p > LIMIT_I || p < -LIMIT_I) return stop(s, 0);
    st(q, c, <i32>p);
    st(d, c, 0);
    return p;
  }
  if (x !== x) return stop(s, -1);
  if (!(Math.abs(nearF) <= LIMIT + 1)) return stop(s, 0);
  const v = settleCode(table, x, nearF, p, w);
  const dv = v - p;
  // The code is an integer within LIMIT + 2: exact in binary64.
  const vF = <f64>v;
  if (v > LIMIT_I || v < -LIMIT_I || dv > LIMIT_I || dv < -LIMIT_I) return stop(s, 0);
  st(d, c, <i32>dv);
  const bits = load<f64>(s, 24) + settledBits;
  const se = load<f64>(s, 16) + (x - vF) * (x - vF) * step * step;
  store<f64>(s, bits, 24);
  store<f64>(s, se, 16);
  if (se > seLimit || bits > bitsLimit) return stop(s, 0);
  st(q, c, <i32>v);
  return v;
}

/** Stop the lane at state s with `status`: LIMIT_I + 1 (see {@link settle}). */
@inline
function stop(s: usize, status: i32): i64 {
  store<i32>(s, status);
  return LIMIT_I + 1;
}

/** floor(num / total) for total > 0, exactly (see kernels/blend-encode.ts, floorDiv). */
@inline
function floorDiv(num: i64, total: i32): i64 {
  let p = <i64>Math.floor(<f64>num / <f64>total);
  if (p * <i64>total > num) p--;
  else if ((p + 1) * <i64>total <= num) p++;
  return p;
}

/**
 * The blend's cell (row i > 0, column j > 0) of a lane: its five
 * predictions from the lane's codes, weighted by its errors around the
 * cell (errs of this row, above of the row above), the code settled, and
 * the cell's errors recorded; false where the lane stops.
 */
@inline
function blendCell(s: usize, q: usize, d: usize, errs: usize, above: usize, weight: usize, table: usize, i: i32, j: i32, n: i32, c: i32, valid: bool, x: f64, nearF: f64, step: f64, w: f64, seLimit: f64, bitsLimit: f64): bool {
  const last = j + 1 === n;
  const wl = <i64>ld(q, c - 1);
  const ww = j >= 2 ? <i64>ld(q, c - 2) : wl;
  const nw = <i64>ld(q, c - n - 1);
  const nn = <i64>ld(q, c - n);
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
  const v = settle(s, q, d, table, c, valid, x, nearF, floorDiv(num, total), step, w, seLimit, bitsLimit);
  if (v > LIMIT_I) return false;
  st(errs, u, cap(v - p0));
  st(errs, u + 1, cap(v - p1));
  st(errs, u + 2, cap(v - p2));
  st(errs, u + 3, cap(v - p3));
  st(errs, u + 4, cap(v - p4));
  return true;
}

/** The sums of the row below's neighbourhoods from this row's errors (kernels/blend-encode.ts): at column j, the errors at j - 1, j and j + 1; in the last column up-right is up. */
function rowSums(errs: usize, below: usize, n: i32): void {
  const lastAt = 5 * (n - 1);
  let t = 0;
  for (; t + 4 <= lastAt; t += 4) {
    const at = errs + (<usize>t << 2);
    v128.store(below + (<usize>t << 2), i32x4.add(i32x4.add(v128.load(at - 20), v128.load(at)), v128.load(at + 20)));
  }
  for (; t < lastAt; t++) st(below, t, ld(errs, t - 5) + ld(errs, t) + ld(errs, t + 5));
  if (n > 1) for (let t = lastAt; t < lastAt + 5; t++) st(below, t, ld(errs, t - 5) + 2 * ld(errs, t));
  else memory.fill(below, 0, 20);
}

/** The walks of `lanes` weights with the blend (see the module's comment), under the limits seLimit and bitsLimit. */
export function rdoBlendLanes(grid: usize, codes: usize, q: usize, d: usize, table: usize, m: i32, n: i32, step: f64, weights: usize, lanes: i32, seLimit: f64, bitsLimit: f64, keep: f64, restSe: usize, restBits: usize, weight: usize, parts: usize, partBytes: usize, state: usize): void {
  const start = keep * load<f64>(restSe) > seLimit || keep * load<f64>(restBits) > bitsLimit ? 0 : 1;
  const cellBytes = <usize>(m * n) << 2;
  const rowBytes = <usize>(5 * n) << 2;
  for (let l = 0; l < lanes; l++) {
    const s = state + <usize>l * STATE;
    store<i32>(s, start);
    store<f64>(s, 0, 16);
    store<f64>(s, 0, 24);
    // The errors' guard (5 cells before the row) and the sums of the row above row 1 (the second array), 0.
    const part = parts + <usize>l * partBytes;
    memory.fill(part, 0, 32);
    memory.fill(part + 32 + 2 * rowBytes, 0, rowBytes);
  }
  let walking = start * lanes;
  for (let i = 0; i < m && walking > 0; i++) {
    const row = i * n;
    // This row's sums of the row above alternate between the two arrays after the errors.
    const above: usize = 32 + rowBytes + (<usize>(i & 1) * rowBytes);
    // The first row predicts from the left, the first column from above (the blend's edges): a loop of their own
    // (one loop over every cell with the edges tested a lane took 1.08-1.09 times the time of a walk of one weight,
    // the two builds alternated on bench/'s turbulence and vega-datasets annual-precip, scratch/blend1.mjs).
    for (let j = 0; j < (i === 0 ? n : 1); j++) {
      const c = row + j;
      const valid = load<u8>(codes + <usize>c) === 0;
      const x = load<f64>(grid + (<usize>c << 3));
      const nearF = roundJs(x);
      for (let l = 0; l < lanes; l++) {
        const s = state + <usize>l * STATE;
        if (load<i32>(s) <= 0) continue;
        const ql = q + <usize>l * cellBytes;
        const p: i64 = j > 0 ? <i64>ld(ql, c - 1) : i > 0 ? <i64>ld(ql, c - n) : 0;
        if (settle(s, ql, d + <usize>l * cellBytes, table, c, valid, x, nearF, p, step, load<f64>(weights + (<usize>l << 3)), seLimit, bitsLimit) > LIMIT_I) walking--;
        // Column 0's errors are 0.
        else if (i > 0) memory.fill(parts + <usize>l * partBytes + 32, 0, 20);
      }
    }
    if (i === 0) continue;
    for (let j = 1; j < n; j++) {
      const c = row + j;
      const valid = load<u8>(codes + <usize>c) === 0;
      const x = load<f64>(grid + (<usize>c << 3));
      const nearF = roundJs(x);
      for (let l = 0; l < lanes; l++) {
        const s = state + <usize>l * STATE;
        if (load<i32>(s) <= 0) continue;
        const part = parts + <usize>l * partBytes;
        if (!blendCell(s, q + <usize>l * cellBytes, d + <usize>l * cellBytes, part + 32, part + above, weight, table, i, j, n, c, valid, x, nearF, step, load<f64>(weights + (<usize>l << 3)), seLimit, bitsLimit)) walking--;
      }
    }
    for (let l = 0; l < lanes; l++) {
      const part = parts + <usize>l * partBytes;
      if (load<i32>(state + <usize>l * STATE) > 0) rowSums(part + 32, part + 32 + rowBytes + (<usize>((i + 1) & 1) * rowBytes), n);
    }
  }
}
