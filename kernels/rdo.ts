/**
 * The rate-distortion module (entry file): the walks of the residual
 * search for a mean squared error allotment (src/codec/rdo.ts, RdoWalk.run
 * and the walk over RowFloor's sums, which kernels/rdo-floor.ts computes),
 * here with the predictors other than the blend, and with the blend in
 * kernels/rdo-blend.ts (exported below). Encoder-side only:
 * readers and the browser's decoding bundle never load it. Compiled by
 * `npm run kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts;
 * laid out and copied in and out by src/wasm/rdo.ts. Every code,
 * difference and sum is the JavaScript's (see {@link rdoWalk} for how).
 *
 * Memory (byte addresses): grid (m x n binary64: the Valid cells' scaled
 * values (orig - base) / step at the walk's step, which kernels/rdo-floor.ts
 * computes once a step for the walks at every weight: read instead of
 * divided, the walk of the plain predictor took 0.8 times the time, 17.8
 * against 21.9 ns a cell, minima of 21 alternated on a 512 x 512 tile of
 * bench/'s turbulence, scratch/walk-bench.mjs, issue 10), codes (m x n
 * class codes, u8: 0 is Valid), q (m x n i32 scratch), d
 * (m x n i32 out: the differences, 0 at cells that are not Valid), table
 * (the rough bits of differences 0 .. TABLE - 1, binary64), restSe and
 * restBits (m + 1 binary64 each: RowFloor's sums from each row to the
 * end), out (the walk's squared error and rough bits, two binary64).
 */

export { rdoBlendLanes } from './rdo-blend';

import { LIMIT, LIMIT_I, roundJs, settleCode, settledBits } from './rdo-cell';

/**
 * One walk (RdoWalk.run with its sums starting at 0, predictor `kind`
 * from None to Median): 1 when every cell is walked within the limits
 * (the sums in `out`), 0 where the JavaScript returns false, -1 where a
 * cell's scaled value is NaN (the caller walks in JavaScript instead).
 * The codes, predictions and differences are integers, held in i64 (the
 * JavaScript's binary64 holds them exactly: every code is within 2^30, a
 * prediction within 3 x 2^30), so the same values; only the scaled value
 * x and the sums are binary64, in the JavaScript's operations and order.
 * In i64 the walk took about 0.8 times the time it took in binary64 (two
 * builds alternated on bench/'s turbulence at psnr:40, scratch
 * measurement, issue 72): fewer conversions a cell.
 */
export function rdoWalk(grid: usize, codes: usize, q: usize, d: usize, table: usize, m: i32, n: i32, kind: i32, step: f64, w: f64, seLimit: f64, bitsLimit: f64, keep: f64, restSe: usize, restBits: usize, out: usize): i32 {
  if (keep * load<f64>(restSe) > seLimit || keep * load<f64>(restBits) > bitsLimit) return 0;
  let se: f64 = 0;
  let bits: f64 = 0;
  for (let i = 0; i < m; i++) {
    // The code just settled (the left neighbour of the next cell), held here rather than read back from q.
    let left: i64 = 0;
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      let p: i64 = 0;
      if (kind !== 0) {
        if (i === 0) p = j === 0 ? 0 : left;
        else if (j === 0) p = <i64>load<i32>(q + (<usize>(c - n) << 2));
        else {
          const b = <i64>load<i32>(q + (<usize>(c - n) << 2));
          const u = <i64>load<i32>(q + (<usize>(c - n - 1) << 2));
          if (kind === 1) p = left + b - u;
          else if (kind === 2) p = left;
          else if (kind === 3) p = b;
          else if (kind === 4) p = (left + b) >> 1;
          else {
            const lo = left < b ? left : b;
            const hi = left < b ? b : left;
            p = u >= hi ? lo : u <= lo ? hi : left + b - u;
          }
        }
      }
      if (load<u8>(codes + <usize>c) !== 0) {
        if (p > LIMIT_I || p < -LIMIT_I) return 0;
        store<i32>(q + (<usize>c << 2), <i32>p);
        store<i32>(d + (<usize>c << 2), 0);
        left = p;
        continue;
      }
      const x = load<f64>(grid + (<usize>c << 3));
      if (x !== x) return -1;
      const nearF = roundJs(x);
      // Beyond LIMIT + 1 both the nearest code and the next one towards p are beyond LIMIT: the JavaScript returns false.
      if (!(Math.abs(nearF) <= LIMIT + 1)) return 0;
      const v = settleCode(table, x, nearF, p, w);
      const dv = v - p;
      // The code is an integer within LIMIT + 2: exact in binary64.
      const vF = <f64>v;
      const cellBits = settledBits;
      if (v > LIMIT_I || v < -LIMIT_I || dv > LIMIT_I || dv < -LIMIT_I) return 0;
      store<i32>(d + (<usize>c << 2), <i32>dv);
      bits += cellBits;
      se += (x - vF) * (x - vF) * step * step;
      store<i32>(q + (<usize>c << 2), <i32>v);
      left = v;
    }
    if (se > seLimit || bits > bitsLimit || se + keep * load<f64>(restSe + (<usize>(i + 1) << 3)) > seLimit || bits + keep * load<f64>(restBits + (<usize>(i + 1) << 3)) > bitsLimit) return 0;
  }
  store<f64>(out, se);
  store<f64>(out + 8, bits);
  return 1;
}
