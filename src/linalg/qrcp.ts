/**
 * Householder QR with column pivoting (Businger-Golub) on a column-major
 * matrix, stopping early once every remaining column is negligible. Used to
 * precondition and rank-reduce the Jacobi SVD.
 */
import { householder, reflect, sumSquares } from './householder.js';

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

    // The reflector for w[i.., i] (tau 0: H_i = I, R[i][i] = w[i][i]), applied to the trailing columns, whose norms are then downdated.
    tau[i] = householder(w, rows, i);
    if (tau[i] !== 0) reflect(w, rows, i, tau[i], w, i + 1, cols);
    for (let j = i + 1; j < cols; j++) {
      const cj = j * rows;
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
 * {@link qrcp}: each reflector applied by reflect, four columns a pass,
 * a column whose dot product with it is 0 left as it is.
 */
export function applyQ(w: Float64Array, rows: number, f: Qrcp, y: Float64Array, ncols: number): void {
  for (let i = f.rank - 1; i >= 0; i--) if (f.tau[i] !== 0) reflect(w, rows, i, f.tau[i], y, 0, ncols, true);
}
