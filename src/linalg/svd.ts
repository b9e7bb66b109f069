/**
 * Dense thin SVD by one-sided Jacobi rotations (Hestenes), preconditioned by
 * a rank-revealing pivoted QR. It works on flat, row-major Float64Arrays and
 * is deterministic: the same input gives bit-identical output on every run.
 * The small symmetric positive (semi)definite solver is in spd.ts, the
 * truncated SVD in truncated.ts.
 */

import { jacobi } from './jacobi.js';
import { exponentOf, maxAbs, mulPow2, scaleByPow2 } from './pow2.js';
import { sumSquares } from './householder.js';
import { applyQ, qrcp, type Qrcp } from './qrcp.js';
import { checkShape } from './shape.js';

/**
 * Thin SVD of a row-major m x n matrix: a = u * diag(s) * v^T. k = min(m, n).
 *
 * - `s` is descending and >= 0.
 * - For every j with `s[j] > 0`, column j of `u` and column j of `v` are unit
 *   vectors, orthogonal to the other such columns (to about 1e-14).
 * - For every j with `s[j] === 0`, column j of `u` and column j of `v` are all
 *   zeros. Singular values at float64 rounding level, i.e. below about
 *   2^-52 * ||a||_F, may be reported as exactly 0 (see {@link svd}).
 */
export interface Svd {
  /** Number of rows of the input. */
  m: number;
  /** Number of columns of the input. */
  n: number;
  /** min(m, n): number of singular triplets. */
  k: number;
  /** Left singular vectors, m x k row-major. */
  u: Float64Array;
  /** Singular values, k, descending, >= 0. */
  s: Float64Array;
  /** Right singular vectors, n x k row-major. */
  v: Float64Array;
}

/** Pivoted QR stops once every trailing column norm is <= DROP * ||a||_F. */
const DROP = Number.EPSILON;
/** Jacobi columns below FLUSH times the largest are reported as 0 (guards underflow). */
const FLUSH = 1e-140;

/**
 * Thin singular value decomposition of the row-major m x n matrix `a`
 * (`a` is not modified). See {@link Svd} for the guarantees on the result.
 *
 * Method: the matrix (or its transpose, if m < n) is scaled by a power of
 * two near its max-abs entry, reduced by Householder QR with column
 * pivoting, and the transposed triangular factor is orthogonalized by cyclic
 * one-sided Jacobi rotations. The QR stops when every remaining column has
 * norm <= 2^-52 * ||a||_F; dropping that block changes a by at most
 * sqrt(min(m, n)) * 2^-52 * ||a||_F (Frobenius), and the singular values it
 * held are reported as 0 with zero columns in u and v (as is, as an
 * underflow guard, any value below 1e-140 * s[0]).
 *
 * Entries anywhere in the finite float64 range work, subnormals included; a
 * singular value whose true value exceeds Number.MAX_VALUE is returned as
 * Infinity. If `a` contains NaN or +-Infinity, every entry of `u`, `s` and
 * `v` is NaN.
 *
 * @throws InputError (code `shape`) if m or n is not a positive integer or
 *   `a.length !== m * n`.
 */
export function svd(a: Float64Array, m: number, n: number): Svd {
  checkShape(a.length, m, n, 'svd');
  const tall = m >= n;
  const M = tall ? m : n; // rows of the working matrix
  const N = tall ? n : m; // columns of the working matrix
  const k = N;
  const u = new Float64Array(m * k);
  const s = new Float64Array(k);
  const v = new Float64Array(n * k);
  const red = reduce(a, m, n, true);
  if (red === 'nan') {
    u.fill(NaN);
    s.fill(NaN);
    v.fill(NaN);
    return { m, n, k, u, s, v };
  }
  if (red === 'zero') return { m, n, k, u, s, v };
  const { w, qr, x, vx, e } = red;
  const r = qr.rank;
  const norms = columnNorms(x, N, r);
  const order = new Array<number>(r);
  for (let j = 0; j < r; j++) order[j] = j;
  order.sort((p, q) => norms[q] - norms[p] || p - q);
  const top = norms[order[0]];

  // Long-side vectors Q [vx; 0] (M x r, column-major).
  const y = new Float64Array(M * r);
  for (let c = 0; c < r; c++) {
    const yo = c * M;
    const vo = c * r;
    for (let t = 0; t < r; t++) y[yo + t] = vx[vo + t];
  }
  applyQ(w, M, qr, y, r);

  const long = tall ? u : v;
  const short = tall ? v : u;
  const perm = qr.perm;
  for (let jj = 0; jj < r; jj++) {
    const j = order[jj];
    const sj = norms[j];
    if (!(sj > FLUSH * top)) continue; // s[jj] stays 0, its columns stay zero
    s[jj] = mulPow2(sj, e);
    const yo = j * M;
    for (let i = 0; i < M; i++) long[i * k + jj] = y[yo + i];
    const inv = 1 / sj;
    const xo = j * N;
    for (let t = 0; t < N; t++) short[perm[t] * k + jj] = x[xo + t] * inv;
  }
  return { m, n, k, u, s, v };
}

/** Euclidean norms of the r columns of the column-major N x r matrix x: the unscaled singular values after the Jacobi stage. */
function columnNorms(x: Float64Array, N: number, r: number): Float64Array {
  const norms = new Float64Array(r);
  for (let j = 0; j < r; j++) norms[j] = Math.sqrt(sumSquares(x, j * N, N));
  return norms;
}

/** The pivoted-QR and Jacobi stages shared by {@link svd} and {@link singularValues}. */
function reduce(a: Float64Array, m: number, n: number, vectors: boolean): 'nan' | 'zero' | { w: Float64Array; qr: Qrcp; x: Float64Array; vx: Float64Array; e: number } {
  const tall = m >= n;
  const M = tall ? m : n;
  const N = tall ? n : m;
  const amax = maxAbs(a);
  if (amax !== amax) return 'nan';
  if (amax === 0) return 'zero';
  const e = exponentOf(amax);

  // Column-major M x N working copy of a (tall) or a^T (wide), scaled by 2^-e.
  const w = new Float64Array(M * N);
  if (tall) {
    const h = Math.trunc(-e / 2);
    const f1 = 2 ** h;
    const f2 = 2 ** (-e - h);
    for (let i = 0; i < m; i++) {
      const row = i * n;
      for (let j = 0; j < n; j++) w[j * M + i] = a[row + j] * f1 * f2;
    }
  } else {
    scaleByPow2(a, w, -e); // row j of a is column j of a^T
  }

  // w P = Q R, R of rank r (trailing block dropped).
  const total = sumSquares(w, 0, M * N);
  const qr = qrcp(w, M, N, DROP * DROP * total);
  const r = qr.rank;

  // x = R^T (N x r, column-major): column i is row i of R.
  const x = new Float64Array(N * r);
  for (let i = 0; i < r; i++) {
    const xo = i * N;
    for (let j = i; j < N; j++) x[xo + j] = w[j * M + i];
  }
  const vx = new Float64Array(vectors ? r * r : 0);
  for (let j = 0; vectors && j < r; j++) vx[j * r + j] = 1;
  // x vx = Ux diag(sigma), so a = (Q vx) diag(sigma) (P Ux)^T.
  jacobi(x, N, r, vectors ? vx : null);
  return { w, qr, x, vx, e };
}

/**
 * The singular values of the row-major m x n matrix `a`, in decreasing
 * order, min(m, n) of them: bit for bit those {@link svd} returns (the same
 * rotations), without the work of the singular vectors.
 */
export function singularValues(a: Float64Array, m: number, n: number): Float64Array {
  checkShape(a.length, m, n, 'singularValues');
  const N = Math.min(m, n);
  const s = new Float64Array(N);
  const red = reduce(a, m, n, false);
  if (red === 'nan') return s.fill(NaN);
  if (red === 'zero') return s;
  const { x, qr, e } = red;
  const r = qr.rank;
  const sorted = Array.from(columnNorms(x, N, r)).sort((p, q) => q - p);
  const top = sorted[0];
  for (let jj = 0; jj < r; jj++) if (sorted[jj] > FLUSH * top) s[jj] = mulPow2(sorted[jj], e);
  return s;
}
