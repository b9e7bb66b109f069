/**
 * Walks of the residual search's plain predictors at one step in one pass
 * over the tile, up to four (src/codec/rdo.ts: the predictor plain
 * rounding picks at four rate weights, or Lorenzo and the median at one;
 * exported by kernels/rdo-floor.ts, whose module has the room). Each lane
 * is one walk (a predictor and a weight), with its own codes,
 * differences and sums, every one the JavaScript's (RdoWalk.run: the same
 * operations in the same order as kernels/rdo.ts's rdoWalk). A walk's
 * chain through its codes (the left code, its prediction, the settled
 * code) is long and serial; the lanes' chains are independent, so the
 * processor overlaps them: four lanes took 0.6-0.65 of the time of four
 * walks one after the other (a 512 x 512 tile of bench/'s turbulence at
 * the search's step for psnr:40, scratch/proto/benchl.mjs, medians of 15
 * alternated).
 *
 * The lanes share one limit on the rough bits, which may be looser than
 * the one a walk would have had on its own (the search tightens it as
 * walks are ranked). So each lane also keeps, over its rows, the largest
 * squared error and rough bits its sums plus the floor's sums after the
 * row reached (from before the first row on): a walk of the same codes
 * under a limit L stops short exactly when one of those passes its limit
 * (RdoWalk.run's test after each row; the sums only grow), which the
 * caller checks against the limit the walk would have had.
 *
 * Memory (byte addresses): grid, codes and table as kernels/rdo.ts's
 * walk; rows (2 n i32 a lane: the lane's codes of the row above and this
 * one); d (m x n i32 a lane, out: the lane's differences, 0 at cells that
 * are not Valid); weights (a binary64 a lane); kinds (the predictor, None
 * 0 to the median 5, an i32 a lane); restSe and restBits
 * (RowFloor's sums, m + 1 binary64 each); state (48 bytes a lane, out):
 * status (i32 at 0: 1 when every cell was walked within the limits, 0
 * where the JavaScript returns false under these limits, -1 where a cell's
 * scaled value is NaN), the left code (i64 at 8, scratch), the squared
 * error (binary64 at 16), the rough bits (24), and the largest squared
 * error (32) and rough bits (40) with the floor's.
 */
import { interior, LIMIT, LIMIT_I, roundJs, settleCode, settledBits } from './rdo-cell';

/** Bytes of a lane's state. */
const STATE: usize = 48;

/** The prediction of a plain predictor (None 0 to the median 5) at row i, column j, from the left code and the lane's row above. */
@inline
function predict(kind: i32, i: i32, j: i32, left: i64, up: usize): i64 {
  if (kind === 0 || (i === 0 && j === 0)) return 0;
  if (i === 0) return left;
  const b = <i64>load<i32>(up + (<usize>j << 2));
  if (j === 0) return b;
  return interior(kind, left, b, <i64>load<i32>(up + (<usize>(j - 1) << 2)));
}

/** Stop lane state `s` with `status`: 1 (one lane fewer walking). */
@inline
function stop(s: usize, status: i32): i32 {
  store<i32>(s, status);
  return 1;
}

/**
 * One cell of lane l (walking at `s`): its code settled given its
 * prediction, its difference and sums stored; 1 when the lane stops here.
 */
@inline
function cell(s: usize, l: usize, kind: i32, i: i32, j: i32, c: i32, valid: bool, x: f64, nearF: f64, rows: usize, rowBytes: usize, d: usize, cellBytes: usize, table: usize, weights: usize, step: f64): i32 {
  const laneRows = rows + l * 2 * rowBytes;
  const p = predict(kind, i, j, load<i64>(s, 8), laneRows + <usize>((i + 1) & 1) * rowBytes);
  let v: i64 = p;
  const at = d + l * cellBytes + (<usize>c << 2);
  if (!valid) {
    if (p > LIMIT_I || p < -LIMIT_I) return stop(s, 0);
    store<i32>(at, 0);
  } else {
    if (x !== x) return stop(s, -1);
    // Beyond LIMIT + 1 both the nearest code and the next one towards p are beyond LIMIT: the JavaScript returns false.
    if (!(Math.abs(nearF) <= LIMIT + 1)) return stop(s, 0);
    v = settleCode(table, x, nearF, p, load<f64>(weights + (l << 3)));
    const dv = v - p;
    if (v > LIMIT_I || v < -LIMIT_I || dv > LIMIT_I || dv < -LIMIT_I) return stop(s, 0);
    store<i32>(at, <i32>dv);
    store<f64>(s, load<f64>(s, 24) + settledBits, 24);
    // The code is an integer within LIMIT + 2: exact in binary64.
    const vF = <f64>v;
    store<f64>(s, load<f64>(s, 16) + (x - vF) * (x - vF) * step * step, 16);
  }
  store<i32>(laneRows + <usize>(i & 1) * rowBytes + (<usize>j << 2), <i32>v);
  store<i64>(s, v, 8);
  return 0;
}

/** The walks of `lanes` predictors and weights (see the module's comment), under the limits seLimit and bitsLimit. */
export function rdoLanes(grid: usize, codes: usize, rows: usize, d: usize, table: usize, m: i32, n: i32, kinds: usize, step: f64, weights: usize, lanes: i32, seLimit: f64, bitsLimit: f64, keep: f64, restSe: usize, restBits: usize, state: usize): void {
  const seAt = keep * load<f64>(restSe);
  const bitsAt = keep * load<f64>(restBits);
  const start = seAt > seLimit || bitsAt > bitsLimit ? 0 : 1;
  for (let l = 0; l < lanes; l++) {
    const s = state + <usize>l * STATE;
    store<i32>(s, start);
    store<f64>(s, 0, 16);
    store<f64>(s, 0, 24);
    store<f64>(s, seAt, 32);
    store<f64>(s, bitsAt, 40);
  }
  let walking = start * lanes;
  const rowBytes = <usize>n << 2;
  const cellBytes = <usize>(m * n) << 2;
  for (let i = 0; i < m && walking > 0; i++) {
    for (let l = 0; l < lanes; l++) store<i64>(state + <usize>l * STATE, 0, 8);
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const valid = load<u8>(codes + <usize>c) === 0;
      const x = load<f64>(grid + (<usize>c << 3));
      const nearF = roundJs(x);
      for (let l = 0; l < lanes; l++) {
        const s = state + <usize>l * STATE;
        if (load<i32>(s) > 0) walking -= cell(s, <usize>l, load<i32>(kinds + (<usize>l << 2)), i, j, c, valid, x, nearF, rows, rowBytes, d, cellBytes, table, weights, step);
      }
    }
    // RdoWalk.run's test after the row, with the floor of the rows left; the largest sums with it kept.
    const seRest = keep * load<f64>(restSe + (<usize>(i + 1) << 3));
    const bitsRest = keep * load<f64>(restBits + (<usize>(i + 1) << 3));
    for (let l = 0; l < lanes; l++) {
      const s = state + <usize>l * STATE;
      if (load<i32>(s) <= 0) continue;
      const seFloor = load<f64>(s, 16) + seRest;
      const bitsFloor = load<f64>(s, 24) + bitsRest;
      if (seFloor > load<f64>(s, 32)) store<f64>(s, seFloor, 32);
      if (bitsFloor > load<f64>(s, 40)) store<f64>(s, bitsFloor, 40);
      if (seFloor > seLimit || bitsFloor > bitsLimit) walking -= stop(s, 0);
    }
  }
}
