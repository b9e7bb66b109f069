/**
 * The low-rank product of a tile's reconstruction (src/codec/reconstruct.ts,
 * lowRank; spec/FORMAT.md, "Reconstruction"): out[i,j] = ((+0 + l[i,0]
 * w[0,j]) + l[i,1] w[1,j] + ...) + center, each output's sum from +0 in
 * increasing rank order, a multiply then an add (no fused multiply-add), so
 * every bit is the JavaScript's. 128-bit SIMD across j: each lane is one
 * output, with its own sum in the same order; eight outputs at a time (four
 * vectors, so four independent chains of adds hide the add's latency), then
 * two, then one.
 *
 * Memory (byte addresses, binary64): l (m x r, row-major), w (r x n,
 * row-major), out (m x n, row-major); r >= 1.
 */
export function lowRank(l: usize, w: usize, m: i32, n: i32, r: i32, center: f64, out: usize): void {
  const cv = f64x2.splat(center);
  const zero = f64x2.splat(0.0);
  const stride = <usize>n << 3;
  for (let i = 0; i < m; i++) {
    const li = l + (<usize>(i * r) << 3);
    const oi = out + (<usize>(i * n) << 3);
    let j = 0;
    for (; j + 8 <= n; j += 8) {
      let a0 = zero;
      let a1 = zero;
      let a2 = zero;
      let a3 = zero;
      let wp = w + (<usize>j << 3);
      for (let k = 0; k < r; k++) {
        const x = f64x2.splat(load<f64>(li + (<usize>k << 3)));
        a0 = f64x2.add(a0, f64x2.mul(x, v128.load(wp)));
        a1 = f64x2.add(a1, f64x2.mul(x, v128.load(wp, 16)));
        a2 = f64x2.add(a2, f64x2.mul(x, v128.load(wp, 32)));
        a3 = f64x2.add(a3, f64x2.mul(x, v128.load(wp, 48)));
        wp += stride;
      }
      const o = oi + (<usize>j << 3);
      v128.store(o, f64x2.add(a0, cv));
      v128.store(o, f64x2.add(a1, cv), 16);
      v128.store(o, f64x2.add(a2, cv), 32);
      v128.store(o, f64x2.add(a3, cv), 48);
    }
    for (; j + 2 <= n; j += 2) {
      let a0 = zero;
      let wp = w + (<usize>j << 3);
      for (let k = 0; k < r; k++) {
        a0 = f64x2.add(a0, f64x2.mul(f64x2.splat(load<f64>(li + (<usize>k << 3))), v128.load(wp)));
        wp += stride;
      }
      v128.store(oi + (<usize>j << 3), f64x2.add(a0, cv));
    }
    if (j < n) {
      let a = 0.0;
      let wp = w + (<usize>j << 3);
      for (let k = 0; k < r; k++) {
        a = a + load<f64>(li + (<usize>k << 3)) * load<f64>(wp);
        wp += stride;
      }
      store<f64>(oi + (<usize>j << 3), a + center);
    }
  }
}

/**
 * The rest of a tile's reconstruction (src/codec/reconstruct.ts,
 * reconstruct) on `cells` outputs of {@link lowRank} at `acc`: x = acc + q
 * step when `q` is not 0 (the code converted exactly, a multiply then an
 * add), then rounded to binary32 (f32.demote_f64: round to nearest, ties
 * to even, as Math.fround) when `f32` is not 0, stored at `out`. Result: 1
 * when every stored value is finite, 0 when one is not.
 *
 * Four cells a step in 128-bit SIMD, each lane the scalar's operations on
 * one cell (f64x2 multiply and add, f32x4.demote_f64x2_zero rounding as
 * f32.demote_f64 does), the rest one at a time. A lane's x - x is 0 for a
 * finite x and NaN otherwise, and NaN stays NaN through the running sum of
 * them, so one test at the end finds a value that is not finite. Measured
 * on the volcano grid's tile at rel:1e-3 (rank 0, 5307 cells, the whole
 * reconstruction through src/wasm/lowrank.ts, scratch/read-parts.mjs, Node
 * 20, two alternating runs, medians of 5 batches): 8.1-8.7 -> 3.9-4.1 us.
 */
export function finishBand(acc: usize, cells: i32, q: usize, step: f64, out: usize, f32: i32): i32 {
  const sv = f64x2.splat(step);
  let nan = f64x2.splat(0.0);
  let c = 0;
  if (f32 !== 0) {
    for (; c + 4 <= cells; c += 4) {
      const a = acc + (<usize>c << 3);
      let x0 = v128.load(a);
      let x1 = v128.load(a, 16);
      if (q !== 0) {
        const qc = q + (<usize>c << 2);
        x0 = f64x2.add(x0, f64x2.mul(f64x2.convert_low_i32x4_s(v128.load64_zero(qc)), sv));
        x1 = f64x2.add(x1, f64x2.mul(f64x2.convert_low_i32x4_s(v128.load64_zero(qc, 8)), sv));
      }
      const y0 = f32x4.demote_f64x2_zero(x0);
      const y1 = f32x4.demote_f64x2_zero(x1);
      const o = out + (<usize>c << 2);
      v128.store64_lane(o, y0, 0);
      v128.store64_lane(o, y1, 0, 8);
      nan = f64x2.add(nan, f64x2.promote_low_f32x4(f32x4.sub(y0, y0)));
      nan = f64x2.add(nan, f64x2.promote_low_f32x4(f32x4.sub(y1, y1)));
    }
  } else {
    for (; c + 2 <= cells; c += 2) {
      let x = v128.load(acc + (<usize>c << 3));
      if (q !== 0) x = f64x2.add(x, f64x2.mul(f64x2.convert_low_i32x4_s(v128.load64_zero(q + (<usize>c << 2))), sv));
      v128.store(out + (<usize>c << 3), x);
      nan = f64x2.add(nan, f64x2.sub(x, x));
    }
  }
  let bad = v128.any_true(f64x2.ne(nan, nan));
  for (; c < cells; c++) {
    let x = load<f64>(acc + (<usize>c << 3));
    if (q !== 0) x = x + <f64>load<i32>(q + (<usize>c << 2)) * step;
    if (f32 !== 0) {
      const y = <f32>x;
      store<f32>(out + (<usize>c << 2), y);
      bad = bad || y - y !== 0;
    } else {
      store<f64>(out + (<usize>c << 3), x);
      bad = bad || x - x !== 0;
    }
  }
  return bad ? 0 : 1;
}
