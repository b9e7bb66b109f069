/**
 * The product y = w g of the randomized range finder (src/linalg/truncated.ts,
 * mulA), with 128-bit SIMD across two independent outputs: the two lanes of
 * a vector hold two columns of the sketch, so each lane is one output's dot
 * product, summed exactly as the JavaScript does it (from +0, j in
 * increasing order, a product rounded then added: no fused multiply-add in
 * WebAssembly's SIMD), and the results are bit for bit the same.
 *
 * Layouts (byte addresses in this module's memory, binary64):
 * - w: row-major, rows x cols;
 * - g: the sketch's columns in pairs, pair p holding columns 2p and 2p + 1
 *   interleaved: g[((p * cols) + j) * 2 + lane];
 * - y: column-major, rows x (2 * pairs).
 * Blocks of two rows of w by four pairs (eight columns) of g: each load
 * feeds four or two vector products, and the eight sums stay in registers.
 */

/** Writes the two lanes of `s` (row i, pair p) into y's columns 2p and 2p + 1. */
@inline
function put(y: usize, colBytes: usize, p: i32, i: i32, s: v128): void {
  const at = y + <usize>(2 * p) * colBytes + (<usize>i << 3);
  f64.store(at, f64x2.extract_lane(s, 0));
  f64.store(at + colBytes, f64x2.extract_lane(s, 1));
}

export function mulPairs(w: usize, rows: i32, cols: i32, g: usize, pairs: i32, y: usize): void {
  const rowBytes = <usize>cols << 3;
  const pairBytes = <usize>cols << 4;
  const colBytes = <usize>rows << 3;
  let p = 0;
  for (; p + 3 < pairs; p += 4) {
    const gp = g + <usize>p * pairBytes;
    let i = 0;
    for (; i + 1 < rows; i += 2) {
      const ra = w + <usize>i * rowBytes;
      const rb = ra + rowBytes;
      let s0 = f64x2.splat(0);
      let s1 = f64x2.splat(0);
      let s2 = f64x2.splat(0);
      let s3 = f64x2.splat(0);
      let t0 = f64x2.splat(0);
      let t1 = f64x2.splat(0);
      let t2 = f64x2.splat(0);
      let t3 = f64x2.splat(0);
      for (let j: usize = 0; j < rowBytes; j += 8) {
        const a = v128.load64_splat(ra + j);
        const b = v128.load64_splat(rb + j);
        const o = gp + (j << 1);
        const g0 = v128.load(o);
        const g1 = v128.load(o + pairBytes);
        const g2 = v128.load(o + 2 * pairBytes);
        const g3 = v128.load(o + 3 * pairBytes);
        s0 = f64x2.add(s0, f64x2.mul(a, g0));
        s1 = f64x2.add(s1, f64x2.mul(a, g1));
        s2 = f64x2.add(s2, f64x2.mul(a, g2));
        s3 = f64x2.add(s3, f64x2.mul(a, g3));
        t0 = f64x2.add(t0, f64x2.mul(b, g0));
        t1 = f64x2.add(t1, f64x2.mul(b, g1));
        t2 = f64x2.add(t2, f64x2.mul(b, g2));
        t3 = f64x2.add(t3, f64x2.mul(b, g3));
      }
      put(y, colBytes, p, i, s0);
      put(y, colBytes, p + 1, i, s1);
      put(y, colBytes, p + 2, i, s2);
      put(y, colBytes, p + 3, i, s3);
      put(y, colBytes, p, i + 1, t0);
      put(y, colBytes, p + 1, i + 1, t1);
      put(y, colBytes, p + 2, i + 1, t2);
      put(y, colBytes, p + 3, i + 1, t3);
    }
    if (i < rows) {
      const ra = w + <usize>i * rowBytes;
      let s0 = f64x2.splat(0);
      let s1 = f64x2.splat(0);
      let s2 = f64x2.splat(0);
      let s3 = f64x2.splat(0);
      for (let j: usize = 0; j < rowBytes; j += 8) {
        const a = v128.load64_splat(ra + j);
        const o = gp + (j << 1);
        s0 = f64x2.add(s0, f64x2.mul(a, v128.load(o)));
        s1 = f64x2.add(s1, f64x2.mul(a, v128.load(o + pairBytes)));
        s2 = f64x2.add(s2, f64x2.mul(a, v128.load(o + 2 * pairBytes)));
        s3 = f64x2.add(s3, f64x2.mul(a, v128.load(o + 3 * pairBytes)));
      }
      put(y, colBytes, p, i, s0);
      put(y, colBytes, p + 1, i, s1);
      put(y, colBytes, p + 2, i, s2);
      put(y, colBytes, p + 3, i, s3);
    }
  }
  // The last one to three pairs, one at a time, two rows at a time.
  for (; p < pairs; p++) {
    const gp = g + <usize>p * pairBytes;
    let i = 0;
    for (; i + 1 < rows; i += 2) {
      const ra = w + <usize>i * rowBytes;
      const rb = ra + rowBytes;
      let s0 = f64x2.splat(0);
      let t0 = f64x2.splat(0);
      for (let j: usize = 0; j < rowBytes; j += 8) {
        const g0 = v128.load(gp + (j << 1));
        s0 = f64x2.add(s0, f64x2.mul(v128.load64_splat(ra + j), g0));
        t0 = f64x2.add(t0, f64x2.mul(v128.load64_splat(rb + j), g0));
      }
      put(y, colBytes, p, i, s0);
      put(y, colBytes, p, i + 1, t0);
    }
    if (i < rows) {
      const ra = w + <usize>i * rowBytes;
      let s0 = f64x2.splat(0);
      for (let j: usize = 0; j < rowBytes; j += 8) s0 = f64x2.add(s0, f64x2.mul(v128.load64_splat(ra + j), v128.load(gp + (j << 1))));
      put(y, colBytes, p, i, s0);
    }
  }
}

/**
 * z = w^T q without a transposed copy of w: q in column pairs as g above,
 * pair p holding q's columns 2p and 2p + 1 for every row i at
 * q[((p * rows) + i) * 2 + lane]; z in the same pairs over w's columns,
 * z[((p * cols) + j) * 2 + lane]. Row by row of w, each output adds its
 * terms in increasing i from +0, a product rounded then added: the sums
 * {@link mulPairs} forms over the transpose, bit for bit. Blocks of two rows
 * of w by four pairs: the eight vectors of q stay in registers while the
 * two rows stream once past the block's outputs.
 */
export function mulTPairs(w: usize, rows: i32, cols: i32, q: usize, pairs: i32, z: usize): void {
  const rowBytes = <usize>cols << 3;
  const zPairBytes = <usize>cols << 4;
  const qPairBytes = <usize>rows << 4;
  memory.fill(z, 0, <usize>pairs * zPairBytes);
  let i = 0;
  for (; i + 1 < rows; i += 2) {
    const ra = w + <usize>i * rowBytes;
    const rb = ra + rowBytes;
    const qi = q + (<usize>i << 4);
    let p = 0;
    for (; p + 3 < pairs; p += 4) {
      const qp = qi + <usize>p * qPairBytes;
      const a0 = v128.load(qp);
      const b0 = v128.load(qp + 16);
      const a1 = v128.load(qp + qPairBytes);
      const b1 = v128.load(qp + qPairBytes + 16);
      const a2 = v128.load(qp + 2 * qPairBytes);
      const b2 = v128.load(qp + 2 * qPairBytes + 16);
      const a3 = v128.load(qp + 3 * qPairBytes);
      const b3 = v128.load(qp + 3 * qPairBytes + 16);
      const zp = z + <usize>p * zPairBytes;
      for (let j: usize = 0; j < rowBytes; j += 8) {
        const x = v128.load64_splat(ra + j);
        const y = v128.load64_splat(rb + j);
        const o = zp + (j << 1);
        v128.store(o, f64x2.add(f64x2.add(v128.load(o), f64x2.mul(x, a0)), f64x2.mul(y, b0)));
        const o1 = o + zPairBytes;
        v128.store(o1, f64x2.add(f64x2.add(v128.load(o1), f64x2.mul(x, a1)), f64x2.mul(y, b1)));
        const o2 = o1 + zPairBytes;
        v128.store(o2, f64x2.add(f64x2.add(v128.load(o2), f64x2.mul(x, a2)), f64x2.mul(y, b2)));
        const o3 = o2 + zPairBytes;
        v128.store(o3, f64x2.add(f64x2.add(v128.load(o3), f64x2.mul(x, a3)), f64x2.mul(y, b3)));
      }
    }
    for (; p < pairs; p++) {
      const qp = qi + <usize>p * qPairBytes;
      const a0 = v128.load(qp);
      const b0 = v128.load(qp + 16);
      const zp = z + <usize>p * zPairBytes;
      for (let j: usize = 0; j < rowBytes; j += 8) {
        const o = zp + (j << 1);
        v128.store(o, f64x2.add(f64x2.add(v128.load(o), f64x2.mul(v128.load64_splat(ra + j), a0)), f64x2.mul(v128.load64_splat(rb + j), b0)));
      }
    }
  }
  if (i < rows) {
    const ra = w + <usize>i * rowBytes;
    const qi = q + (<usize>i << 4);
    for (let p = 0; p < pairs; p++) {
      const a0 = v128.load(qi + <usize>p * qPairBytes);
      const zp = z + <usize>p * zPairBytes;
      for (let j: usize = 0; j < rowBytes; j += 8) {
        const o = zp + (j << 1);
        v128.store(o, f64x2.add(v128.load(o), f64x2.mul(v128.load64_splat(ra + j), a0)));
      }
    }
  }
}
