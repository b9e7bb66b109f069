/**
 * The blend predictor's walk as the encoder takes it (src/codec/reconstruct.ts,
 * blendWalk with a settle function, in predict() and predictedFill()): q
 * holds the codes in raster order, and for each cell the walk forms the
 * prediction p from the codes already walked, writes the difference
 * d[c] = v - p, where v is the cell's code, and keeps v in q for the
 * cells after it. A cell whose class in `codes` is not Valid (0) takes its
 * prediction as its code (v = p, or 0 when |p| exceeds the limit), so its
 * difference is 0; with `codes` 0 every cell keeps its own code. With
 * `check` 1 a difference beyond +-limit stops the walk (0 returned, as
 * predict() gives null); with `check` 0 none does (predictedFill()). 1
 * when every cell is walked.
 *
 * The same arithmetic as the decoder's walk (kernels/blend.ts, which says
 * why i64 keeps every sum exact): the predictions and their differences are
 * i64, the activities and weights i32.
 *
 * Memory (byte addresses, i32 entries): q (m x n), d (m x n), weight (the
 * table floor(65536 / (1 + e)) for e in 0 .. 4 x 8191), above and below
 * (5 n each; above is cleared here), codes (m x n u8, or 0 for none), and
 * a row's weighted sums (n i64, at `nums`) and weight totals (n i32, at
 * `totals`), scratch for a walk without a class map, and a row's errors
 * (5 n i32 at `errs`, after 5 more that are cleared here).
 */

import { cap, ld, st } from './blend-parts';

/** Cell c's code given its prediction p: its own, or (a cell not Valid) p, 0 beyond the limit. */
@inline
function codeOf(q: usize, codes: usize, c: i32, p: i64, lim: i64): i64 {
  if (codes === 0 || load<u8>(codes + <usize>c) === 0) return <i64>ld(q, c);
  return p > lim || p < -lim ? 0 : p;
}

/** Settle cell c: its code into q, its difference into d; false when check is on and the difference leaves +-lim. */
@inline
function settle(q: usize, d: usize, codes: usize, c: i32, p: i64, lim: i64, check: bool): bool {
  const v = codeOf(q, codes, c, p, lim);
  const x = v - p;
  if (check && (x > lim || x < -lim)) return false;
  st(q, c, <i32>v);
  st(d, c, <i32>x);
  return true;
}

/**
 * floor(num / total) for total > 0, through binary64 as the JavaScript
 * takes it: |num| is below 2^51 (so exact as a double), and the two tests
 * undo a quotient rounded across an integer, which cannot happen here
 * (a quotient that is not an integer is at least 1 / total, more than
 * 2^-19, from one, and rounding moves it by at most half an ulp, below
 * 2^-20 for a quotient below 2^33 in magnitude: every part, so every
 * weighted mean of them, is within 3 x 2^31), so the row pass below
 * leaves them out. A binary64 division takes a fraction of the cycles of
 * an i64 one.
 */
@inline
function floorDiv(num: i64, total: i32): i64 {
  let p = <i64>Math.floor(<f64>num / <f64>total);
  if (p * <i64>total > num) p--;
  else if ((p + 1) * <i64>total <= num) p++;
  return p;
}

export function blendEncode(q: usize, d: usize, m: i32, n: i32, limit: i32, check: i32, weight: usize, above0: usize, below0: usize, codes: usize, nums: usize, totals: usize, errs: usize): i32 {
  const lim = <i64>limit;
  const limF = <f64>limit;
  // errs[-5 .. -1], the errors before column 0 in the sums below, stay 0.
  memory.fill(errs - 20, 0, 20);
  const checked = check !== 0;
  let above = above0;
  let below = below0;
  memory.fill(above, 0, <usize>(5 * n) << 2);
  for (let i = 0; i < m; i++) {
    const row = i * n;
    if (!settle(q, d, codes, row, i === 0 ? 0 : <i64>ld(q, row - n), lim, checked)) return 0;
    if (i === 0) {
      for (let c = 1; c < n; c++) {
        if (!settle(q, d, codes, c, <i64>ld(q, c - 1), lim, checked)) return 0;
      }
      continue;
    }
    // Errors of the row's cells, five a column (column 0's are 0), in `errs` rather than in locals:
    // the loop keeps few values live (a register each), and the next row's sums are added after it.
    memory.fill(errs, 0, 20);
    // The left, two-left, up-left and up codes carried along the row (each loaded once): at j = 1
    // two-left is left (P4 = W), as the JavaScript takes it.
    let w = <i64>ld(q, row);
    let ww = w;
    let nw = <i64>ld(q, row - n);
    let nn = <i64>ld(q, row - n + 1);
    for (let j = 1; j < n; j++) {
      const c = row + j;
      const last = j + 1 === n;
      const ne = last ? nn : <i64>ld(q, c - n + 1);
      const p0 = w;
      const p1 = nn;
      const p2 = w + nn - nw;
      const p3 = nn + ne - (i >= 2 && !last ? <i64>ld(q, c - 2 * n + 1) : ne);
      const p4 = 2 * w - ww;
      const u = 5 * j;
      // Part k's activity: its error at the left cell plus the row above's sum.
      const w0 = ld(weight, ld(errs, u - 5) + ld(above, u));
      const w1 = ld(weight, ld(errs, u - 4) + ld(above, u + 1));
      const w2 = ld(weight, ld(errs, u - 3) + ld(above, u + 2));
      const w3 = ld(weight, ld(errs, u - 2) + ld(above, u + 3));
      const w4 = ld(weight, ld(errs, u - 1) + ld(above, u + 4));
      const total = w0 + w1 + w2 + w3 + w4;
      const num = <i64>w0 * p0 + <i64>w1 * p1 + <i64>w2 * p2 + <i64>w3 * p3 + <i64>w4 * p4 + <i64>(total >> 1);
      let v: i64;
      if (codes === 0) {
        // Every code is known: the errors need no prediction, and the predictions (a division each)
        // are left to a second pass over the row, so that no cell waits on the one before.
        v = <i64>ld(q, c);
        store<f64>(nums + (<usize>j << 3), <f64>num);
        st(totals, j, total);
      } else {
        // A missing cell's code is its prediction, which the next cell's parts need at once.
        const p = floorDiv(num, total);
        v = codeOf(q, codes, c, p, lim);
        const x = v - p;
        if (checked && (x > lim || x < -lim)) return 0;
        st(q, c, <i32>v);
        st(d, c, <i32>x);
      }
      st(errs, u, cap(v - p0));
      st(errs, u + 1, cap(v - p1));
      st(errs, u + 2, cap(v - p2));
      st(errs, u + 3, cap(v - p3));
      st(errs, u + 4, cap(v - p4));
      ww = w;
      w = v;
      nw = nn;
      nn = ne;
    }
    if (codes === 0) {
      for (let j = 1; j < n; j++) {
        const c = row + j;
        // In binary64 throughout, exactly (see floorDiv: the quotient never rounds across an integer).
        const x = <f64>ld(q, c) - Math.floor(load<f64>(nums + (<usize>j << 3)) / <f64>ld(totals, j));
        if (checked && (x > limF || x < -limF)) return 0;
        st(d, c, <i32>x);
      }
    }
    // The next row's sums: at column j, the errors at j - 1, j and j + 1 (none before column 0; in the
    // last column up-right is up, counted twice), entry 5 j + k = errs[5 (j - 1) + k] + errs[5 j + k] + errs[5 (j + 1) + k].
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
  return 1;
}
