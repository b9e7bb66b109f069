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
 * arithmetic) and keeps the errors of the cell to the left in locals; it
 * stores each cell's five errors, and the next row's activity sums (at
 * column j the errors at j - 1, j and j + 1, five a column) are made after
 * the row, four entries at a time, from the stored errors with a copy of
 * the last column's after it (up-right is up there): no sum is loaded,
 * added to and stored again a cell, as when the walk built them cell by
 * cell. The walk is bound by its instruction count more than by the chain
 * from one cell to the next: two rows walked in step (the lower one column
 * behind, two independent chains) saved about 1% (scratch measurement). On the
 * volcano grid's tile at rel:1e-3 (61 x 87, the walk alone, old and new
 * kernels alternated, scratch/walk-ab.mjs, Node 20, medians of 601):
 * 73.1 -> 66.4 us a tile, and 66.6 -> 65.1 with the limit tested by one
 * unsigned comparison.
 *
 * Memory (byte addresses, i32 entries): q (m x n), weight (the table
 * floor(65536 / (1 + e)) for e in 0 .. 4 x 8191), work (10 n + 18
 * entries, cleared here: the row above's sums, 5 n and 4 of slack for the
 * last four-entry step, then the row's errors from column -1 to column n,
 * 5 (n + 2), the first two columns' always 0, and 4 of slack).
 */

import { cap, ld, st } from './blend-parts';

export function blendDecode(q: usize, m: i32, n: i32, limit: i32, weight: usize, work: usize): i32 {
  const lim = <i64>limit;
  const span = <u64>(lim << 1);
  const n4 = <usize>n << 2;
  // The row above's activity sums (5 a column, from column 0; 4 entries of slack), then the row's errors
  // (5 a column, from column -1 to column n, both kept 0 and the copy of the last column's; 4 of slack).
  const sums = work;
  const errs = work + (<usize>(5 * n + 4) << 2);
  memory.fill(work, 0, <usize>(10 * n + 18) << 2);
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
    // Cell j at pc, the row above's sums at j at pa, this row's errors at j at pe.
    let pc = q + (<usize>(row + 1) << 2);
    const end = q + (<usize>(row + n) << 2);
    let pa = sums + 20;
    let pe = errs + 40;
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
      // |v| > lim in one comparison: v + lim lies in [0, 2 lim] exactly when |v| <= lim.
      if (<u64>(v + lim) > span) return 0;
      store<i32>(pc, <i32>v);
      e0 = cap(v - p0);
      e1 = cap(v - p1);
      e2 = cap(v - p2);
      e3 = cap(v - p3);
      e4 = cap(v - p4);
      store<i32>(pe, e0);
      store<i32>(pe, e1, 4);
      store<i32>(pe, e2, 8);
      store<i32>(pe, e3, 12);
      store<i32>(pe, e4, 16);
      ww = w;
      w = v;
      pc += 4;
      pa += 20;
      pe += 20;
    }
    // Column n: the last column's errors again (its up-right is its up), so that every column's sums are three columns' errors.
    store<i32>(pe, e0);
    store<i32>(pe, e1, 4);
    store<i32>(pe, e2, 8);
    store<i32>(pe, e3, 12);
    store<i32>(pe, e4, 16);
    // The next row's sums: at column j, the errors at j - 1, j and j + 1, four entries at a time.
    const count = <usize>(5 * n) << 2;
    for (let x: usize = 0; x < count; x += 16) {
      const a = errs + x;
      v128.store(sums + x, i32x4.add(i32x4.add(v128.load(a), v128.load(a, 20)), v128.load(a, 40)));
    }
  }
  return 1;
}
