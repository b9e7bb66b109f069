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
 * The floor of the weighted mean is one unsigned division: with W the sum
 * of the weights, num + W 2^34 lies in (W 2^33, 3 W 2^33), so it is
 * positive and below 2^54, and its quotient by W is floor(num / W) + 2^34
 * exactly; a signed division truncates toward zero and needed a multiply
 * and a compare after it to floor a negative quotient. The interior walk
 * goes by pointers along the row (memory offsets in the loads, no index
 * arithmetic), and keeps the two-cell error sums of the next row in memory
 * (`below` at j gets the errors at j - 1 and j when cell j is done, and the
 * error at j + 1 is added when cell j + 1 is), not in five more locals: the
 * walk has more live values than x64 has registers, and V8 spilled them.
 * Measured on the volcano grid's tile at rel:1e-3 (61 x 87, the walk alone,
 * scratch/blend-exp.mjs, Node 20): 76.7 -> 68.8 us a tile, medians of 7,
 * three alternating runs.
 *
 * Memory (byte addresses, i32 entries): q (m x n), weight (the table
 * floor(65536 / (1 + e)) for e in 0 .. 4 x 8191), above and below (5 n
 * each; above is cleared here, below needs no clearing: each entry is
 * written before it is read).
 */

import { cap, ld, st } from './blend-parts';

export function blendDecode(q: usize, m: i32, n: i32, limit: i32, weight: usize, above0: usize, below0: usize): i32 {
  const lim = <i64>limit;
  const n4 = <usize>n << 2;
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
    // The errors of the cell to the left, per part, and the codes one and two to the left.
    let e0 = 0;
    let e1 = 0;
    let e2 = 0;
    let e3 = 0;
    let e4 = 0;
    let w = <i64>ld(q, row);
    let ww = w;
    // Cell j at pc, the row above's sums at j at pa, the next row's at j - 1 at pb.
    let pc = q + (<usize>(row + 1) << 2);
    const end = q + (<usize>(row + n) << 2);
    let pa = above + 20;
    let pb = below;
    // Column 0's two-cell sums (the errors at -1 and 0): 0.
    store<i64>(pb, 0);
    store<i64>(pb, 0, 8);
    store<i32>(pb, 0, 16);
    const two = i >= 2;
    while (pc < end) {
      const up = pc - n4;
      const nn = <i64>load<i32>(up);
      const last = pc + 4 === end;
      const ne = last ? nn : <i64>load<i32>(up, 4);
      const p0 = w;
      const p1 = nn;
      const p2 = w + nn - <i64>load<i32>(up - 4);
      const p3 = nn + ne - (two && !last ? <i64>load<i32>(up - n4, 4) : ne);
      const p4 = 2 * w - ww;
      const w0 = ld(weight, e0 + load<i32>(pa));
      const w1 = ld(weight, e1 + load<i32>(pa, 4));
      const w2 = ld(weight, e2 + load<i32>(pa, 8));
      const w3 = ld(weight, e3 + load<i32>(pa, 12));
      const w4 = ld(weight, e4 + load<i32>(pa, 16));
      const total = w0 + w1 + w2 + w3 + w4;
      const num = <i64>w0 * p0 + <i64>w1 * p1 + <i64>w2 * p2 + <i64>w3 * p3 + <i64>w4 * p4 + <i64>(total >> 1);
      const p = <i64>(<u64>(num + (<i64>total << 34)) / <u64>total) - (<i64>1 << 34);
      const v = <i64>load<i32>(pc) + p;
      if (v > lim || v < -lim) return 0;
      store<i32>(pc, <i32>v);
      const g0 = cap(v - p0);
      const g1 = cap(v - p1);
      const g2 = cap(v - p2);
      const g3 = cap(v - p3);
      const g4 = cap(v - p4);
      // The sums at j - 1 are complete with the errors at j; those at j start with the errors at j - 1 and j.
      store<i32>(pb, load<i32>(pb) + g0);
      store<i32>(pb, load<i32>(pb, 4) + g1, 4);
      store<i32>(pb, load<i32>(pb, 8) + g2, 8);
      store<i32>(pb, load<i32>(pb, 12) + g3, 12);
      store<i32>(pb, load<i32>(pb, 16) + g4, 16);
      store<i32>(pb, e0 + g0, 20);
      store<i32>(pb, e1 + g1, 24);
      store<i32>(pb, e2 + g2, 28);
      store<i32>(pb, e3 + g3, 32);
      store<i32>(pb, e4 + g4, 36);
      e0 = g0;
      e1 = g1;
      e2 = g2;
      e3 = g3;
      e4 = g4;
      ww = w;
      w = v;
      pc += 4;
      pa += 20;
      pb += 20;
    }
    // The last column's sums (pb is there): up-left, up and up-right = up, so its own errors count twice.
    store<i32>(pb, load<i32>(pb) + e0);
    store<i32>(pb, load<i32>(pb, 4) + e1, 4);
    store<i32>(pb, load<i32>(pb, 8) + e2, 8);
    store<i32>(pb, load<i32>(pb, 12) + e3, 12);
    store<i32>(pb, load<i32>(pb, 16) + e4, 16);
    const swap = above;
    above = below;
    below = swap;
  }
  return 1;
}
