/**
 * Dense thin SVD by one-sided Jacobi rotations (Hestenes), and a small
 * symmetric positive (semi)definite solver. Everything works on flat,
 * row-major Float64Arrays and is deterministic: the same input gives
 * bit-identical output on every run.
 */

import { InputCode, InputError } from '../errors.js';
import { exponentOf, mulPow2, scaleByPow2 } from './pow2.js';

/**
 * Thin SVD of a row-major m x n matrix: a = u * diag(s) * v^T. k = min(m, n).
 *
 * - `s` is descending and >= 0.
 * - For every j with `s[j] > 0`, column j of `u` and column j of `v` are unit
 *   vectors, orthogonal to the other such columns (to about 1e-15 * sqrt(max(m, n))).
 * - For every j with `s[j] === 0`, column j of `u` and column j of `v` are all
 *   zeros. A singular value is reported as exactly 0 when it is 0 or below
 *   1e-140 * s[0] (far below float64 resolution of the matrix).
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

/** Rotation threshold: rotate a column pair while |p.q| > JACOBI_TOL * |p| * |q|. */
const JACOBI_TOL = 1e-15;
/** Sweep cap; random 64 x 64 matrices converge in about 10 sweeps. */
const MAX_SWEEPS = 60;
/** Singular values below FLUSH * s[0] are reported as 0 (their columns would not be reliably orthogonal). */
const FLUSH = 1e-140;

function checkShape(len: number, m: number, n: number, what: string): void {
  if (!Number.isInteger(m) || !Number.isInteger(n) || m < 1 || n < 1) {
    throw new InputError(InputCode.Shape, `${what}: shape ${m} x ${n} must be positive integers`);
  }
  if (len !== m * n) {
    throw new InputError(InputCode.Shape, `${what}: array length ${len} does not match shape ${m} x ${n}`);
  }
}

/**
 * Thin singular value decomposition of the row-major m x n matrix `a`
 * (`a` is not modified). See {@link Svd} for the guarantees on the result.
 *
 * The matrix is scaled by a power of two near its max-abs entry before the
 * iteration, so entries anywhere in the finite float64 range (down to
 * subnormals) work; a singular value whose true value exceeds
 * Number.MAX_VALUE is returned as Infinity. If `a` contains NaN or
 * +-Infinity, every entry of `u`, `s` and `v` is NaN.
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

  let amax = 0;
  let probe = 0; // becomes NaN iff some entry is not finite
  for (let i = 0; i < a.length; i++) {
    const x = a[i];
    probe += x * 0;
    const ax = Math.abs(x);
    if (ax > amax) amax = ax;
  }
  if (probe !== 0) {
    u.fill(NaN);
    s.fill(NaN);
    v.fill(NaN);
    return { m, n, k, u, s, v };
  }
  if (amax === 0) return { m, n, k, u, s, v };
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
    // Row j of a is column j of a^T: same memory layout.
    scaleByPow2(a, w, -e);
  }
  const vw = new Float64Array(N * N); // column-major accumulated rotations
  for (let j = 0; j < N; j++) vw[j * N + j] = 1;
  const d = new Float64Array(N); // squared column norms of w
  for (let j = 0; j < N; j++) d[j] = sumSquares(w, j * M, M);

  jacobi(w, M, N, vw, d);

  // Exact column norms, then order by descending norm (ties: lower index first).
  const norms = new Float64Array(N);
  for (let j = 0; j < N; j++) norms[j] = Math.sqrt(sumSquares(w, j * M, M));
  const order = new Array<number>(N);
  for (let j = 0; j < N; j++) order[j] = j;
  order.sort((x, y) => norms[y] - norms[x] || x - y);
  const top = norms[order[0]];

  // Long side: columns of w normalized; short side: columns of vw.
  const long = tall ? u : v;
  const short = tall ? v : u;
  for (let jj = 0; jj < k; jj++) {
    const j = order[jj];
    const sj = norms[j];
    if (!(sj > FLUSH * top)) continue; // s[jj] stays 0, columns stay zero
    s[jj] = mulPow2(sj, e);
    const inv = 1 / sj;
    const wo = j * M;
    for (let i = 0; i < M; i++) long[i * k + jj] = w[wo + i] * inv;
    const vo = j * N;
    for (let i = 0; i < N; i++) short[i * k + jj] = vw[vo + i];
  }
  return { m, n, k, u, s, v };
}

function sumSquares(x: Float64Array, off: number, len: number): number {
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

/**
 * Cyclic one-sided Jacobi on the column-major M x N matrix w (M >= N),
 * accumulating the rotations into the column-major N x N matrix vw.
 * d holds the squared column norms of w and is kept exact (recomputed from
 * the rotated entries). Returns the number of sweeps done.
 */
function jacobi(w: Float64Array, M: number, N: number, vw: Float64Array, d: Float64Array): number {
  const end4 = M - (M & 3);
  for (let sweep = 1; sweep <= MAX_SWEEPS; sweep++) {
    let rotated = false;
    for (let p = 0; p < N - 1; p++) {
      const po = p * M;
      const pv = p * N;
      for (let q = p + 1; q < N; q++) {
        const dp = d[p];
        const dq = d[q];
        if (dp === 0 || dq === 0) continue;
        const qo = q * M;
        let g0 = 0;
        let g1 = 0;
        let g2 = 0;
        let g3 = 0;
        let i = 0;
        for (; i < end4; i += 4) {
          g0 += w[po + i] * w[qo + i];
          g1 += w[po + i + 1] * w[qo + i + 1];
          g2 += w[po + i + 2] * w[qo + i + 2];
          g3 += w[po + i + 3] * w[qo + i + 3];
        }
        for (; i < M; i++) g0 += w[po + i] * w[qo + i];
        const g = g0 + g1 + (g2 + g3);
        if (!(Math.abs(g) > JACOBI_TOL * Math.sqrt(dp) * Math.sqrt(dq))) continue;

        // Rotation [c s; -s c] that zeroes the (p, q) entry of w^T w.
        const zeta = (dq - dp) / (2 * g);
        const az = Math.abs(zeta);
        let t = az > 1e150 ? 0.5 / az : 1 / (az + Math.sqrt(1 + az * az));
        if (zeta < 0) t = -t;
        const c = 1 / Math.sqrt(1 + t * t);
        const sn = c * t;

        let np0 = 0;
        let np1 = 0;
        let nq0 = 0;
        let nq1 = 0;
        i = 0;
        const end2 = M - (M & 1);
        for (; i < end2; i += 2) {
          const x0 = w[po + i];
          const y0 = w[qo + i];
          const x1 = w[po + i + 1];
          const y1 = w[qo + i + 1];
          const a0 = c * x0 - sn * y0;
          const b0 = sn * x0 + c * y0;
          const a1 = c * x1 - sn * y1;
          const b1 = sn * x1 + c * y1;
          w[po + i] = a0;
          w[qo + i] = b0;
          w[po + i + 1] = a1;
          w[qo + i + 1] = b1;
          np0 += a0 * a0;
          nq0 += b0 * b0;
          np1 += a1 * a1;
          nq1 += b1 * b1;
        }
        if (i < M) {
          const x0 = w[po + i];
          const y0 = w[qo + i];
          const a0 = c * x0 - sn * y0;
          const b0 = sn * x0 + c * y0;
          w[po + i] = a0;
          w[qo + i] = b0;
          np0 += a0 * a0;
          nq0 += b0 * b0;
        }
        d[p] = np0 + np1;
        d[q] = nq0 + nq1;

        const qv = q * N;
        for (let r = 0; r < N; r++) {
          const x = vw[pv + r];
          const y = vw[qv + r];
          vw[pv + r] = c * x - sn * y;
          vw[qv + r] = sn * x + c * y;
        }
        rotated = true;
      }
    }
    if (!rotated) return sweep;
  }
  return MAX_SWEEPS;
}

/** Scratch for the Cholesky factor, grown on demand (the solver is not reentrant). */
let cholScratch = new Float64Array(0);

/**
 * Solves the symmetric positive (semi)definite system g x = b for `nrhs`
 * right-hand sides. `g` is r x r row-major and is not modified (only its
 * lower triangle is read); `b` is r x nrhs row-major and is overwritten by x.
 *
 * Uses Cholesky on g scaled to O(1) by a power of two. If a pivot is not
 * clearly positive (<= r * 2^-52 times its diagonal entry), the
 * factorization restarts with a ridge of 1e-12 * trace(g) / r added to the
 * diagonal, growing 100-fold until it succeeds; so a singular g gives a
 * slightly regularized solution, and an indefinite g a finite but
 * meaningless one. If g is all zeros, x = 0. For finite input the result
 * contains no NaN; a component is +-Infinity only if its value exceeds the
 * float64 range. NaN or +-Infinity in g or b gives an all-NaN x.
 *
 * @throws InputError (code `shape`) if r or nrhs is not a positive integer
 *   or an array length does not match.
 */
export function solveSpd(g: Float64Array, r: number, b: Float64Array, nrhs: number): void {
  checkShape(g.length, r, r, 'solveSpd g');
  checkShape(b.length, r, nrhs, 'solveSpd b');
  let gmax = 0;
  let bmax = 0;
  let probe = 0;
  for (let i = 0; i < g.length; i++) {
    const x = g[i];
    probe += x * 0;
    const ax = Math.abs(x);
    if (ax > gmax) gmax = ax;
  }
  for (let i = 0; i < b.length; i++) {
    const x = b[i];
    probe += x * 0;
    const ax = Math.abs(x);
    if (ax > bmax) bmax = ax;
  }
  if (probe !== 0) {
    b.fill(NaN);
    return;
  }
  if (gmax === 0 || bmax === 0) {
    b.fill(0);
    return;
  }
  const eg = exponentOf(gmax);
  const eb = exponentOf(bmax);
  if (cholScratch.length < r * r) cholScratch = new Float64Array(r * r);
  const l = cholScratch;

  let trace = 0;
  for (let i = 0; i < r; i++) trace += mulPow2(g[i * r + i], -eg);
  const base = trace > 0 ? trace / r : 1;
  // Past this ridge g + ridge*I is strictly diagonally dominant, so Cholesky must succeed.
  const certain = 4 * r;
  let ridge = 0;
  for (;;) {
    if (cholesky(g, r, eg, ridge, l)) break;
    ridge = ridge === 0 ? 1e-12 * base : ridge * 100;
    if (ridge > certain) {
      ridge = certain;
      if (!cholesky(g, r, eg, ridge, l)) diagonalFallback(g, r, eg, ridge, l);
      break;
    }
  }

  scaleByPow2(b, b, -eb);
  // Forward: L y = b.
  for (let i = 0; i < r; i++) {
    const bi = i * nrhs;
    const li = i * r;
    for (let j = 0; j < i; j++) {
      const f = l[li + j];
      if (f === 0) continue;
      const bj = j * nrhs;
      for (let c = 0; c < nrhs; c++) b[bi + c] -= f * b[bj + c];
    }
    const inv = 1 / l[li + i];
    for (let c = 0; c < nrhs; c++) b[bi + c] *= inv;
  }
  // Backward: L^T x = y.
  for (let i = r - 1; i >= 0; i--) {
    const bi = i * nrhs;
    for (let j = i + 1; j < r; j++) {
      const f = l[j * r + i];
      if (f === 0) continue;
      const bj = j * nrhs;
      for (let c = 0; c < nrhs; c++) b[bi + c] -= f * b[bj + c];
    }
    const inv = 1 / l[i * r + i];
    for (let c = 0; c < nrhs; c++) b[bi + c] *= inv;
  }
  scaleByPow2(b, b, eb - eg);
}

/**
 * Cholesky g * 2^-eg + ridge * I = L L^T into the lower triangle of l.
 * Returns false as soon as a pivot is not clearly positive.
 */
function cholesky(g: Float64Array, r: number, eg: number, ridge: number, l: Float64Array): boolean {
  const h = Math.trunc(-eg / 2);
  const f1 = 2 ** h;
  const f2 = 2 ** (-eg - h);
  const pivotTol = r * Number.EPSILON;
  for (let j = 0; j < r; j++) {
    const lj = j * r;
    const gjj = g[lj + j] * f1 * f2 + ridge;
    let sum = gjj;
    for (let t = 0; t < j; t++) sum -= l[lj + t] * l[lj + t];
    if (!(sum > pivotTol * gjj)) return false;
    const djj = Math.sqrt(sum);
    l[lj + j] = djj;
    const inv = 1 / djj;
    for (let i = j + 1; i < r; i++) {
      const li = i * r;
      let x = g[li + j] * f1 * f2;
      for (let t = 0; t < j; t++) x -= l[li + t] * l[lj + t];
      l[li + j] = x * inv;
    }
  }
  return true;
}

/** Last resort (not reachable for finite input in exact arithmetic): L = sqrt(diag + ridge). */
function diagonalFallback(g: Float64Array, r: number, eg: number, ridge: number, l: Float64Array): void {
  l.fill(0, 0, r * r);
  for (let j = 0; j < r; j++) {
    const x = mulPow2(g[j * r + j], -eg) + ridge;
    l[j * r + j] = Math.sqrt(x > ridge ? x : ridge);
  }
}
