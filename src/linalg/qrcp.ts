/**
 * Householder QR with column pivoting (Businger-Golub) on a column-major
 * matrix, stopping early once every remaining column is negligible. Used to
 * precondition and rank-reduce the Jacobi SVD.
 */

/** Result of {@link qrcp}; the factors themselves stay in the input array. */
export interface Qrcp {
  /** Number of Householder steps done: the rank kept. */
  rank: number;
  /** Householder scalars, tau[i] for i < rank (H_i = I - tau_i v_i v_i^T). */
  tau: Float64Array;
  /** Column permutation: column j of a*P is column perm[j] of a. */
  perm: Int32Array;
}

/**
 * In-place QR with column pivoting of the column-major rows x cols matrix w
 * (rows >= cols, entries O(1) so squares cannot overflow): w P = Q R.
 *
 * On return, for i < rank, R[i][j] (j >= i) is w[j * rows + i], and the
 * Householder vector v_i is 1 at row i and w[i * rows + t] at rows t > i.
 * The loop stops before step i when every remaining column of the trailing
 * block has squared norm <= drop2; that block is then treated as zero (its
 * contents in w are left unspecified).
 */
export function qrcp(w: Float64Array, rows: number, cols: number, drop2: number): Qrcp {
  const tau = new Float64Array(cols);
  const perm = new Int32Array(cols);
  const vn = new Float64Array(cols); // squared norms of the trailing parts of the columns
  const vref = new Float64Array(cols); // vn when last computed exactly
  for (let j = 0; j < cols; j++) {
    perm[j] = j;
    vn[j] = sumSquares(w, j * rows, rows);
    vref[j] = vn[j];
  }
  let rank = cols;
  for (let i = 0; i < cols; i++) {
    let piv = i;
    for (let j = i + 1; j < cols; j++) if (vn[j] > vn[piv]) piv = j;
    if (!(vn[piv] > drop2)) {
      rank = i;
      break;
    }
    if (piv !== i) {
      const a = i * rows;
      const b = piv * rows;
      for (let t = 0; t < rows; t++) {
        const x = w[a + t];
        w[a + t] = w[b + t];
        w[b + t] = x;
      }
      const pj = perm[i];
      perm[i] = perm[piv];
      perm[piv] = pj;
      vn[piv] = vn[i];
      vref[piv] = vref[i];
    }

    // Householder vector for w[i.., i] (LAPACK dlarfg convention).
    const ci = i * rows;
    const alpha = w[ci + i];
    const xn2 = sumSquares(w, ci + i + 1, rows - i - 1);
    if (xn2 === 0) {
      tau[i] = 0; // H_i = I; R[i][i] = alpha
    } else {
      const nrm = Math.sqrt(alpha * alpha + xn2);
      const beta = alpha >= 0 ? -nrm : nrm;
      tau[i] = (beta - alpha) / beta;
      const inv = 1 / (alpha - beta);
      for (let t = ci + i + 1; t < ci + rows; t++) w[t] *= inv;
      w[ci + i] = beta;
    }

    // Apply H_i to the trailing columns and downdate their norms.
    const ti = tau[i];
    for (let j = i + 1; j < cols; j++) {
      const cj = j * rows;
      if (ti !== 0) {
        let s = w[cj + i];
        for (let t = i + 1; t < rows; t++) s += w[ci + t] * w[cj + t];
        s *= ti;
        w[cj + i] -= s;
        for (let t = i + 1; t < rows; t++) w[cj + t] -= s * w[ci + t];
      }
      const r = w[cj + i];
      const left = vn[j] - r * r;
      // Cancellation guard: recompute when most of the norm is gone.
      if (left <= 1e-6 * vref[j]) {
        vn[j] = sumSquares(w, cj + i + 1, rows - i - 1);
        vref[j] = vn[j];
      } else vn[j] = left;
    }
  }
  return { rank, tau, perm };
}

/**
 * Overwrites the column-major rows x ncols matrix y (rows >= rank) with
 * Q * y, where Q = H_0 ... H_{rank-1} is stored in w and tau as left by
 * {@link qrcp}.
 */
export function applyQ(w: Float64Array, rows: number, f: Qrcp, y: Float64Array, ncols: number): void {
  for (let i = f.rank - 1; i >= 0; i--) {
    const ti = f.tau[i];
    if (ti === 0) continue;
    const ci = i * rows;
    for (let c = 0; c < ncols; c++) {
      const yc = c * rows;
      let s = y[yc + i];
      for (let t = i + 1; t < rows; t++) s += w[ci + t] * y[yc + t];
      if (s === 0) continue;
      s *= ti;
      y[yc + i] -= s;
      for (let t = i + 1; t < rows; t++) y[yc + t] -= s * w[ci + t];
    }
  }
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
