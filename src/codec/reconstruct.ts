/**
 * The reconstruction arithmetic, shared by the decoder and by the encoder's
 * verification (spec/FORMAT.md, "Reconstruction"). Every operation is one
 * IEEE 754 binary64 operation with round-to-nearest-even, in the order
 * written here; JavaScript has no fused multiply-add, so none is used.
 */

/**
 * Low-rank part: out[i,j] = ((+0 + l[i,0]*w[0,j]) + l[i,1]*w[1,j] + ...) + center,
 * with the sum taken in increasing rank order.
 * `l` is m x r row-major (l[i*r+k]), `w` is r x n row-major (w[k*n+j]).
 */
export function lowRank(
  l: Float64Array,
  w: Float64Array,
  m: number,
  n: number,
  r: number,
  center: number,
  out: Float64Array,
): void {
  out.fill(0, 0, m * n);
  for (let i = 0; i < m; i++) {
    const row = i * n;
    for (let k = 0; k < r; k++) {
      const lik = l[i * r + k];
      const wk = k * n;
      // i, k, j loop order: per cell the additions still run in rank order.
      for (let j = 0; j < n; j++) out[row + j] += lik * w[wk + j];
    }
  }
  for (let c = 0; c < m * n; c++) out[c] += center;
}

/** Residual: out[c] = out[c] + q[c] * step, for every cell. */
export function addResidual(out: Float64Array, q: Int32Array, step: number): void {
  for (let c = 0; c < q.length; c++) out[c] += q[c] * step;
}

/** Inverse of the 2-D Lorenzo predictor: q[i,j] = d[i,j] + q[i-1,j] + q[i,j-1] - q[i-1,j-1]. */
export function unpredict(d: Int32Array, m: number, n: number, limit: number): boolean {
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const up = i > 0 ? d[c - n] : 0;
      const left = j > 0 ? d[c - 1] : 0;
      const diag = i > 0 && j > 0 ? d[c - n - 1] : 0;
      const q = d[c] + up + left - diag;
      if (q > limit || q < -limit) return false;
      d[c] = q;
    }
  }
  return true;
}

/** The 2-D Lorenzo prediction residual of q (Ibarria et al., 2003), or null if one exceeds `limit`. */
export function predict(q: Int32Array, m: number, n: number, limit: number): Int32Array | null {
  const d = new Int32Array(q.length);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const up = i > 0 ? q[c - n] : 0;
      const left = j > 0 ? q[c - 1] : 0;
      const diag = i > 0 && j > 0 ? q[c - n - 1] : 0;
      const v = q[c] - up - left + diag;
      if (v > limit || v < -limit) return null;
      d[c] = v;
    }
  }
  return d;
}

/** Round binary64 values to the output dtype (binary32: round-to-nearest-even). */
export function roundTo(values: Float64Array, out: Float32Array | Float64Array): void {
  out.set(values);
}
