/**
 * What the residual search's walks (kernels/rdo.ts, kernels/rdo-blend.ts)
 * read, in a module of its own (kernels/rdo.ts stays under 4 KiB:
 * src/wasm/kernels.ts says why): each cell's difference from the low-rank
 * part, once a tile ({@link residuals}); its scaled value at a step, once
 * a step ({@link scaled}, or {@link rowFloor} with the walks' floor,
 * src/codec/rdo.ts RowFloor.of); and, as the module has the room, the
 * plain predictor's walks of several weights in one pass
 * (kernels/rdo-lanes.ts). Encoder-side only. Compiled by `npm run
 * kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts; laid out
 * by src/wasm/rdo.ts, in the memory of the walks. Every value and sum is
 * the JavaScript's: the same operations in the same order (the scaled
 * value (orig - base) / step of RdoWalk.settle: the difference rounded
 * once, then the quotient); the codes' and predictions' intervals are
 * integers within 4 x 2^30, held in i64 here and in binary64 there, so
 * the same values.
 *
 * Memory (byte addresses): r (m x n binary64: orig - base), grid (m x n
 * binary64, out: the scaled values at a step), codes
 * and table as kernels/rdo.ts's walk, lo and hi (n i32 each, scratch: the
 * codes' intervals of a row), restSe, restBits and restValid (m + 1
 * binary64 each, out).
 */
import { bitsOf, interior, LIMIT, LIMIT_I, roundJs, value } from './rdo-cell';

export { rdoLanes } from './rdo-lanes';

/** The blend predictor's id (src/codec/reconstruct.ts, Predictor.Blend): its prediction is not bounded. */
const BLEND = 6;

/** Entry j of the i32 array at p, widened. */
@inline
function ld(p: usize, j: i32): i64 {
  return <i64>load<i32>(p + (<usize>j << 2));
}

/** x within +-LIMIT. */
@inline
function clip(x: i64): i64 {
  return x < -LIMIT_I ? -LIMIT_I : x > LIMIT_I ? LIMIT_I : x;
}

/**
 * RowFloor.of at step `step` for predictor `kind`: from each row to the
 * end, the least squared error and rough bits a walk adds and the valid
 * cells, into restSe, restBits and restValid; the scaled values into grid
 * first ({@link scaled}). A loop for each predictor (the kind a constant in
 * each): 0.93 of the time of one loop testing it a cell, 11.4 against 12.7
 * ns a cell with Lorenzo (minima of 15 alternated on a 512 x 512 tile of
 * bench/'s turbulence, scratch/floor-bench.mjs, issue 10).
 */
export function rowFloor(r: usize, grid: usize, codes: usize, table: usize, m: i32, n: i32, step: f64, kind: i32, lo: usize, hi: usize, restSe: usize, restBits: usize, restValid: usize): void {
  scaled(r, grid, m * n, step);
  if (kind === 1) rows(grid, codes, table, m, n, step, 1, lo, hi, restSe, restBits, restValid);
  else if (kind === 2) rows(grid, codes, table, m, n, step, 2, lo, hi, restSe, restBits, restValid);
  else if (kind === 3) rows(grid, codes, table, m, n, step, 3, lo, hi, restSe, restBits, restValid);
  else if (kind === 4) rows(grid, codes, table, m, n, step, 4, lo, hi, restSe, restBits, restValid);
  else if (kind === 5) rows(grid, codes, table, m, n, step, 5, lo, hi, restSe, restBits, restValid);
  else rows(grid, codes, table, m, n, step, kind, lo, hi, restSe, restBits, restValid);
  suffix(restSe, m);
  suffix(restBits, m);
  suffix(restValid, m);
}

/** {@link rowFloor}'s row sums with predictor `kind` (inlined with each constant kind). */
@inline
function rows(grid: usize, codes: usize, table: usize, m: i32, n: i32, step: f64, kind: i32, lo: usize, hi: usize, restSe: usize, restBits: usize, restValid: usize): void {
  const bounded = kind !== BLEND;
  for (let i = 0; i < m; i++) {
    let se: f64 = 0;
    let bits: f64 = 0;
    let valid: f64 = 0;
    let ulLo: i64 = 0;
    let ulHi: i64 = 0;
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const upLo = ld(lo, j);
      const upHi = ld(hi, j);
      let pLo: i64 = 0;
      let pHi: i64 = 0;
      if (bounded && kind !== 0 && c !== 0) {
        if (i === 0) {
          pLo = ld(lo, j - 1);
          pHi = ld(hi, j - 1);
        } else if (j === 0) {
          pLo = upLo;
          pHi = upHi;
        } else {
          pLo = interior(kind, ld(lo, j - 1), upLo, ulHi);
          pHi = interior(kind, ld(hi, j - 1), upHi, ulLo);
        }
      }
      ulLo = upLo;
      ulHi = upHi;
      let cLo = clip(pLo);
      let cHi = clip(pHi);
      if (load<u8>(codes + <usize>c) === 0) {
        const x = load<f64>(grid + (<usize>c << 3));
        const v = roundJs(x);
        se += (x - v) * (x - v) * step * step;
        valid++;
        if (!bounded || !(Math.abs(v) <= LIMIT + 1)) {
          bits += 1;
          cLo = -LIMIT_I;
          cHi = LIMIT_I;
        } else {
          cLo = clip(<i64>v - 1);
          cHi = clip(<i64>v + 1);
          bits += bitsOf(table, cLo > pHi ? cLo - pHi : pLo > cHi ? pLo - cHi : 0);
        }
      }
      store<i32>(lo + (<usize>j << 2), <i32>cLo);
      store<i32>(hi + (<usize>j << 2), <i32>cHi);
    }
    store<f64>(restSe + (<usize>i << 3), se);
    store<f64>(restBits + (<usize>i << 3), bits);
    store<f64>(restValid + (<usize>i << 3), valid);
  }
}

/** The m row sums at a (binary64) made sums from each row to the end, entry m 0 (in the JavaScript's order: the later rows' sum plus the row's). */
function suffix(a: usize, m: i32): void {
  store<f64>(a + (<usize>m << 3), 0);
  for (let i = m - 1; i >= 0; i--) store<f64>(a + (<usize>i << 3), load<f64>(a + (<usize>(i + 1) << 3)) + load<f64>(a + (<usize>i << 3)));
}

/** base (m x n binary64) made orig - base (the values binary32 when `f32` is 1, else binary64), at every cell. */
export function residuals(orig: usize, f32: i32, base: usize, cells: i32): void {
  for (let c = 0; c < cells; c++) store<f64>(base + (<usize>c << 3), value(orig, f32, c) - load<f64>(base + (<usize>c << 3)));
}

/**
 * The scaled values r / step into grid (every cell: the walks read the
 * Valid ones), two at a time (the same quotients: IEEE 754 division,
 * lane by lane); with it the floor took 0.88 of the time it took dividing
 * a cell at a time in its loop (12.5 against 14.2 ns a cell with Lorenzo,
 * as above).
 */
export function scaled(r: usize, grid: usize, cells: i32, step: f64): void {
  const s = f64x2.splat(step);
  let c = 0;
  for (; c + 2 <= cells; c += 2) v128.store(grid + (<usize>c << 3), f64x2.div(v128.load(r + (<usize>c << 3)), s));
  for (; c < cells; c++) store<f64>(grid + (<usize>c << 3), load<f64>(r + (<usize>c << 3)) / step);
}
