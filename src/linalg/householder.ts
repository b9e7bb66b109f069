/**
 * The Householder step shared by the QR factorizations (linalg/qrcp.ts,
 * and the range finder's orthonormalization in linalg/truncated.ts): making
 * a reflector (LAPACK dlarfg convention: Anderson et al., LAPACK Users'
 * Guide, 3rd ed., SIAM 1999) and applying it to columns, on column-major
 * Float64Arrays.
 */

/**
 * Make the reflector H_i = I - tau v v^T that zeroes column i of the
 * column-major matrix w (rows per column) below row i, and apply it to that
 * column: w[i * rows + i] becomes beta, rows t > i of the column become v
 * (v is 1 at row i). Returns tau; 0 (H_i = I, the column left as it is)
 * when the column is already zero below row i.
 */
export function householder(w: Float64Array, rows: number, i: number): number {
  const ci = i * rows;
  const alpha = w[ci + i];
  const xn2 = sumSquares(w, ci + i + 1, rows - i - 1);
  if (xn2 === 0) return 0;
  const nrm = Math.sqrt(alpha * alpha + xn2);
  const beta = alpha >= 0 ? -nrm : nrm;
  const inv = 1 / (alpha - beta);
  for (let t = ci + i + 1; t < ci + rows; t++) w[t] *= inv;
  w[ci + i] = beta;
  return (beta - alpha) / beta;
}

/**
 * Applies H_i = I - ti v v^T to columns from..to-1 of the column-major
 * matrix x (rows per column), where v is 1 at row i and h[i * rows + t] at
 * rows t > i (rows above i are zero). Four columns per pass share the loads
 * of v. With `skipZero`, a column whose dot product with v is 0 is left as
 * it is (an update by 0 could turn a -0 entry into +0).
 */
export function reflect(h: Float64Array, rows: number, i: number, ti: number, x: Float64Array, from: number, to: number, skipZero = false): void {
  const ci = i * rows;
  let c = from;
  for (; c + 3 < to; c += 4) {
    const x0 = c * rows;
    const x1 = x0 + rows;
    const x2 = x1 + rows;
    const x3 = x2 + rows;
    let s0 = x[x0 + i];
    let s1 = x[x1 + i];
    let s2 = x[x2 + i];
    let s3 = x[x3 + i];
    for (let t = i + 1; t < rows; t++) {
      const vt = h[ci + t];
      s0 += vt * x[x0 + t];
      s1 += vt * x[x1 + t];
      s2 += vt * x[x2 + t];
      s3 += vt * x[x3 + t];
    }
    if (skipZero && (s0 === 0 || s1 === 0 || s2 === 0 || s3 === 0)) {
      for (const [xc, sc] of [
        [x0, s0],
        [x1, s1],
        [x2, s2],
        [x3, s3],
      ]) {
        if (sc !== 0) updateColumn(h, ci, i, rows, x, xc, sc * ti);
      }
      continue;
    }
    s0 *= ti;
    s1 *= ti;
    s2 *= ti;
    s3 *= ti;
    x[x0 + i] -= s0;
    x[x1 + i] -= s1;
    x[x2 + i] -= s2;
    x[x3 + i] -= s3;
    for (let t = i + 1; t < rows; t++) {
      const vt = h[ci + t];
      x[x0 + t] -= s0 * vt;
      x[x1 + t] -= s1 * vt;
      x[x2 + t] -= s2 * vt;
      x[x3 + t] -= s3 * vt;
    }
  }
  for (; c < to; c++) {
    const x0 = c * rows;
    let s0 = x[x0 + i];
    for (let t = i + 1; t < rows; t++) s0 += h[ci + t] * x[x0 + t];
    if (!(skipZero && s0 === 0)) updateColumn(h, ci, i, rows, x, x0, s0 * ti);
  }
}

/** x[x0 + i] -= s and x[x0 + t] -= s v[t] for the rows t > i (v at h[ci + t]): one column's update by {@link reflect}. */
function updateColumn(h: Float64Array, ci: number, i: number, rows: number, x: Float64Array, x0: number, s: number): void {
  x[x0 + i] -= s;
  for (let t = i + 1; t < rows; t++) x[x0 + t] -= s * h[ci + t];
}

/** Sum of squares of x[off], ..., x[off + len - 1]. */
export function sumSquares(x: Float64Array, off: number, len: number): number {
  let s0 = 0;
  let s1 = 0;
  let i = 0;
  const end2 = len - (len & 1);
  for (; i < end2; i += 2) {
    const a = x[off + i];
    const b = x[off + i + 1];
    s0 += a * a;
    s1 += b * b;
  }
  if (i < len) {
    const a = x[off + i];
    s0 += a * a;
  }
  return s0 + s1;
}
