/**
 * The Gram module (entry file): the Gram matrix of src/linalg/spectrum.ts
 * (gram), for the L2 plan's spectra, with 128-bit SIMD
 * across two entries: each lane of a vector is one entry of the Gram
 * matrix, summed exactly as the JavaScript sums it (from +0, a product
 * rounded then added, no fused multiply-add in WebAssembly's SIMD, the
 * summed index in increasing order), so the result is the same bit for bit.
 *
 * Layouts (byte addresses, binary64, row-major): a (m x n), g (k x k for
 * k = min(m, n), written whole), and for a wide matrix t (n x m: a
 * transposed, scratch). Its reduction to tridiagonal form is in
 * kernels/tridiag.ts (exported below). Encoder-side only; compiled by `npm
 * run kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts, laid
 * out and copied in and out by src/wasm/gram.ts.
 */

export { tridiagonalize } from './tridiag';

/** Rows and columns of the blocks of g worked on at a time (a 64 x 64 block of binary64 is 32 KiB). */
const BLOCK = 64;

/**
 * a^T a of a tall a (m >= n): g[p][q] = sum over rows i of a[i][p] a[i][q],
 * for q >= p (and q = p - 1 where p is odd: a pair starts at an even
 * column), a block of g at a time over every row, four rows a pass (((g +
 * x0 y0) + x1 y1) + ...: one addition a row, in row order); then the
 * lower triangle from the upper.
 */
export function gramTall(a: usize, m: i32, n: i32, g: usize): void {
  const rowBytes = <usize>n << 3;
  memory.fill(g, 0, <usize>n * rowBytes);
  for (let p0 = 0; p0 < n; p0 += BLOCK) {
    const p1 = min(n, p0 + BLOCK);
    for (let q0 = p0; q0 < n; q0 += BLOCK) {
      const q1 = min(n, q0 + BLOCK);
      let i = 0;
      for (; i + 3 < m; i += 4) {
        const r0 = a + <usize>i * rowBytes;
        const r1 = r0 + rowBytes;
        const r2 = r1 + rowBytes;
        const r3 = r2 + rowBytes;
        for (let p = p0; p < p1; p++) {
          const po = <usize>p << 3;
          const x0 = v128.load64_splat(r0 + po);
          const x1 = v128.load64_splat(r1 + po);
          const x2 = v128.load64_splat(r2 + po);
          const x3 = v128.load64_splat(r3 + po);
          const gp = g + <usize>p * rowBytes;
          let q = max(q0, p & ~1);
          for (; q + 1 < q1; q += 2) {
            const qo = <usize>q << 3;
            let s = v128.load(gp + qo);
            s = f64x2.add(s, f64x2.mul(x0, v128.load(r0 + qo)));
            s = f64x2.add(s, f64x2.mul(x1, v128.load(r1 + qo)));
            s = f64x2.add(s, f64x2.mul(x2, v128.load(r2 + qo)));
            s = f64x2.add(s, f64x2.mul(x3, v128.load(r3 + qo)));
            v128.store(gp + qo, s);
          }
          if (q < q1) {
            const qo = <usize>q << 3;
            let s = load<f64>(gp + qo);
            s = s + f64x2.extract_lane(x0, 0) * load<f64>(r0 + qo);
            s = s + f64x2.extract_lane(x1, 0) * load<f64>(r1 + qo);
            s = s + f64x2.extract_lane(x2, 0) * load<f64>(r2 + qo);
            s = s + f64x2.extract_lane(x3, 0) * load<f64>(r3 + qo);
            store<f64>(gp + qo, s);
          }
        }
      }
      for (; i < m; i++) {
        const r0 = a + <usize>i * rowBytes;
        for (let p = p0; p < p1; p++) {
          const po = <usize>p << 3;
          const x = v128.load64_splat(r0 + po);
          const gp = g + <usize>p * rowBytes;
          let q = max(q0, p & ~1);
          for (; q + 1 < q1; q += 2) {
            const qo = <usize>q << 3;
            v128.store(gp + qo, f64x2.add(v128.load(gp + qo), f64x2.mul(x, v128.load(r0 + qo))));
          }
          if (q < q1) {
            const qo = <usize>q << 3;
            store<f64>(gp + qo, load<f64>(gp + qo) + f64x2.extract_lane(x, 0) * load<f64>(r0 + qo));
          }
        }
      }
    }
  }
  for (let p = 0; p < n; p++) for (let q = 0; q < p; q++) store<f64>(g + ((<usize>(p * n + q)) << 3), load<f64>(g + ((<usize>(q * n + p)) << 3)));
}

/**
 * a a^T of a wide a (m < n): g[p][q] = sum over columns j of a[p][j]
 * a[q][j], for q >= p (from an even q: q = p - 1 where p is odd gives
 * g[p - 1][p], the same products in the same order), each sum from +0 in
 * increasing j; written at (p, q) and (q, p). The lanes take two rows q, q
 * + 1 from a transposed copy t of a (column j of a is row j of t), eight
 * rows at a time where there are that many.
 */
export function gramWide(a: usize, m: i32, n: i32, t: usize, g: usize): void {
  const mBytes = <usize>m << 3;
  for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) store<f64>(t + <usize>j * mBytes + (<usize>i << 3), load<f64>(a + ((<usize>(i * n + j)) << 3)));
  for (let p = 0; p < m; p++) {
    const rp = a + <usize>p * (<usize>n << 3);
    let q = p & ~1;
    for (; q + 7 < m; q += 8) {
      const tq = t + (<usize>q << 3);
      let s0 = f64x2.splat(0);
      let s1 = f64x2.splat(0);
      let s2 = f64x2.splat(0);
      let s3 = f64x2.splat(0);
      for (let j = 0; j < n; j++) {
        const x = v128.load64_splat(rp + (<usize>j << 3));
        const o = tq + <usize>j * mBytes;
        s0 = f64x2.add(s0, f64x2.mul(x, v128.load(o)));
        s1 = f64x2.add(s1, f64x2.mul(x, v128.load(o, 16)));
        s2 = f64x2.add(s2, f64x2.mul(x, v128.load(o, 32)));
        s3 = f64x2.add(s3, f64x2.mul(x, v128.load(o, 48)));
      }
      put(g, m, p, q, s0);
      put(g, m, p, q + 2, s1);
      put(g, m, p, q + 4, s2);
      put(g, m, p, q + 6, s3);
    }
    for (; q + 1 < m; q += 2) {
      const tq = t + (<usize>q << 3);
      let s = f64x2.splat(0);
      for (let j = 0; j < n; j++) s = f64x2.add(s, f64x2.mul(v128.load64_splat(rp + (<usize>j << 3)), v128.load(tq + <usize>j * mBytes)));
      put(g, m, p, q, s);
    }
    if (q < m) {
      let s: f64 = 0;
      for (let j = 0; j < n; j++) s += load<f64>(rp + (<usize>j << 3)) * load<f64>(t + <usize>j * mBytes + (<usize>q << 3));
      store<f64>(g + ((<usize>(p * m + q)) << 3), s);
      store<f64>(g + ((<usize>(q * m + p)) << 3), s);
    }
  }
}

/** Entries (p, q) and (p, q + 1) of g (k x k) from the two lanes of s, and their mirrors (q, p) and (q + 1, p). */
@inline
function put(g: usize, k: i32, p: i32, q: i32, s: v128): void {
  const a = f64x2.extract_lane(s, 0);
  const b = f64x2.extract_lane(s, 1);
  store<f64>(g + ((<usize>(p * k + q)) << 3), a);
  store<f64>(g + ((<usize>(p * k + q + 1)) << 3), b);
  store<f64>(g + ((<usize>(q * k + p)) << 3), a);
  store<f64>(g + ((<usize>((q + 1) * k + p)) << 3), b);
}
