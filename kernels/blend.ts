/**
 * The blend predictor's decoding walk (src/codec/reconstruct.ts, blendWalk
 * with no settle function): q holds the differences in raster order, each
 * becomes q[c] + p, and a code beyond +-limit stops the walk (0 returned;
 * 1 when every cell is decoded). The same arithmetic as the JavaScript,
 * which works in binary64 on integers below 2^53 (exact): here the
 * predictions, sums and the weighted mean are i64, so no value wraps for any
 * 32-bit input (|parts| <= 3 x 2^31, |sum of w_k P_k| < 5 x 2^16 x 3 x 2^31
 * < 2^51), the activities and weights i32 (at most 4 x 8191 and 65536).
 *
 * Memory (byte addresses, i32 entries): q (m x n), weight (the table
 * floor(65536 / (1 + e)) for e in 0 .. 4 x 8191), above and below (5 n
 * each; above is cleared here, below needs no clearing: each entry is
 * written before it is read).
 */

import { cap, ld, st } from './blend-parts';

export function blendDecode(q: usize, m: i32, n: i32, limit: i32, weight: usize, above0: usize, below0: usize): i32 {
  const lim = <i64>limit;
  let above = above0;
  let below = below0;
  memory.fill(above, 0, <usize>(5 * n) << 2);
  for (let i = 0; i < m; i++) {
    const row = i * n;
    {
      const v = <i64>ld(q, row) + <i64>(i === 0 ? 0 : ld(q, row - n));
      if (v > lim || v < -lim) return 0;
      st(q, row, <i32>v);
    }
    if (i === 0) {
      for (let c = 1; c < n; c++) {
        const v = <i64>ld(q, c) + <i64>ld(q, c - 1);
        if (v > lim || v < -lim) return 0;
        st(q, c, <i32>v);
      }
      continue;
    }
    let e0 = 0;
    let e1 = 0;
    let e2 = 0;
    let e3 = 0;
    let e4 = 0;
    let f0 = 0;
    let f1 = 0;
    let f2 = 0;
    let f3 = 0;
    let f4 = 0;
    for (let j = 1; j < n; j++) {
      const c = row + j;
      const w = <i64>ld(q, c - 1);
      const nn = <i64>ld(q, c - n);
      const last = j + 1 === n;
      const ne = last ? nn : <i64>ld(q, c - n + 1);
      const p0 = w;
      const p1 = nn;
      const p2 = w + nn - <i64>ld(q, c - n - 1);
      const p3 = nn + ne - (i >= 2 && !last ? <i64>ld(q, c - 2 * n + 1) : ne);
      const p4 = 2 * w - (j >= 2 ? <i64>ld(q, c - 2) : w);
      const u = 5 * j;
      const w0 = ld(weight, e0 + ld(above, u));
      const w1 = ld(weight, e1 + ld(above, u + 1));
      const w2 = ld(weight, e2 + ld(above, u + 2));
      const w3 = ld(weight, e3 + ld(above, u + 3));
      const w4 = ld(weight, e4 + ld(above, u + 4));
      const total = w0 + w1 + w2 + w3 + w4;
      const num = <i64>w0 * p0 + <i64>w1 * p1 + <i64>w2 * p2 + <i64>w3 * p3 + <i64>w4 * p4 + <i64>(total >> 1);
      // Floor division: i64 division truncates toward zero, one too high for a negative inexact quotient.
      let p = num / <i64>total;
      if (p * <i64>total > num) p--;
      const v = <i64>ld(q, c) + p;
      if (v > lim || v < -lim) return 0;
      st(q, c, <i32>v);
      const g0 = cap(v - p0);
      const g1 = cap(v - p1);
      const g2 = cap(v - p2);
      const g3 = cap(v - p3);
      const g4 = cap(v - p4);
      const t = u - 5;
      st(below, t, f0 + e0 + g0);
      st(below, t + 1, f1 + e1 + g1);
      st(below, t + 2, f2 + e2 + g2);
      st(below, t + 3, f3 + e3 + g3);
      st(below, t + 4, f4 + e4 + g4);
      f0 = e0;
      f1 = e1;
      f2 = e2;
      f3 = e3;
      f4 = e4;
      e0 = g0;
      e1 = g1;
      e2 = g2;
      e3 = g3;
      e4 = g4;
    }
    const t = 5 * (n - 1);
    st(below, t, f0 + 2 * e0);
    st(below, t + 1, f1 + 2 * e1);
    st(below, t + 2, f2 + 2 * e2);
    st(below, t + 3, f3 + 2 * e3);
    st(below, t + 4, f4 + 2 * e4);
    const swap = above;
    above = below;
    below = swap;
  }
  return 1;
}
