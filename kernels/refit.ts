/**
 * The encoder's module for the refit of a candidate's right factor
 * (src/codec/tile-encode.ts, quantizeFactors): B += Lq^T A over a band of
 * the tile's rows, with 128-bit SIMD across two columns of A. Encoder-side
 * only. Compiled by `npm run kernels` (scripts/kernels.mjs) into
 * src/wasm/kernels-bytes.ts; laid out and copied in and out by
 * src/wasm/refit.ts.
 *
 * Each entry of B adds its terms in increasing row i, a product rounded
 * then added (no fused multiply-add in WebAssembly), skipping the rows
 * whose left factor entry is zero, as the JavaScript does: the same bits.
 */

/**
 * b (r x n, row-major) += l^T a for `rows` rows: l (rows x r, row-major),
 * a (rows x n, row-major), all binary64; `nz` room for r i32 (the row's
 * non-zero entries of l). Four rows of b at a time, each load of a row of
 * a feeding four of them.
 */
export function refitBand(l: usize, r: i32, a: usize, rows: i32, n: i32, b: usize, nz: usize): void {
  const rowBytes = <usize>n << 3;
  const pairBytes = <usize>(n >> 1) << 4;
  const odd = (n & 1) != 0;
  for (let i = 0; i < rows; i++) {
    const li = l + ((<usize>i * <usize>r) << 3);
    const ai = a + <usize>i * rowBytes;
    let count = 0;
    for (let k = 0; k < r; k++) {
      if (f64.load(li + (<usize>k << 3)) != 0) {
        i32.store(nz + (<usize>count << 2), k);
        count++;
      }
    }
    let z = 0;
    for (; z + 3 < count; z += 4) {
      const k0 = i32.load(nz + (<usize>z << 2));
      const k1 = i32.load(nz + (<usize>(z + 1) << 2));
      const k2 = i32.load(nz + (<usize>(z + 2) << 2));
      const k3 = i32.load(nz + (<usize>(z + 3) << 2));
      const l0 = f64.load(li + (<usize>k0 << 3));
      const l1 = f64.load(li + (<usize>k1 << 3));
      const l2 = f64.load(li + (<usize>k2 << 3));
      const l3 = f64.load(li + (<usize>k3 << 3));
      const b0 = b + <usize>k0 * rowBytes;
      const b1 = b + <usize>k1 * rowBytes;
      const b2 = b + <usize>k2 * rowBytes;
      const b3 = b + <usize>k3 * rowBytes;
      const s0 = f64x2.splat(l0);
      const s1 = f64x2.splat(l1);
      const s2 = f64x2.splat(l2);
      const s3 = f64x2.splat(l3);
      for (let j: usize = 0; j < pairBytes; j += 16) {
        const x = v128.load(ai + j);
        v128.store(b0 + j, f64x2.add(v128.load(b0 + j), f64x2.mul(s0, x)));
        v128.store(b1 + j, f64x2.add(v128.load(b1 + j), f64x2.mul(s1, x)));
        v128.store(b2 + j, f64x2.add(v128.load(b2 + j), f64x2.mul(s2, x)));
        v128.store(b3 + j, f64x2.add(v128.load(b3 + j), f64x2.mul(s3, x)));
      }
      if (odd) {
        const x = f64.load(ai + pairBytes);
        f64.store(b0 + pairBytes, f64.load(b0 + pairBytes) + l0 * x);
        f64.store(b1 + pairBytes, f64.load(b1 + pairBytes) + l1 * x);
        f64.store(b2 + pairBytes, f64.load(b2 + pairBytes) + l2 * x);
        f64.store(b3 + pairBytes, f64.load(b3 + pairBytes) + l3 * x);
      }
    }
    for (; z < count; z++) {
      const k0 = i32.load(nz + (<usize>z << 2));
      const l0 = f64.load(li + (<usize>k0 << 3));
      const b0 = b + <usize>k0 * rowBytes;
      const s0 = f64x2.splat(l0);
      for (let j: usize = 0; j < pairBytes; j += 16) v128.store(b0 + j, f64x2.add(v128.load(b0 + j), f64x2.mul(s0, v128.load(ai + j))));
      if (odd) f64.store(b0 + pairBytes, f64.load(b0 + pairBytes) + l0 * f64.load(ai + pairBytes));
    }
  }
}
