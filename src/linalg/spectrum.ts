/**
 * Singular values alone, fast: the eigenvalues of the Gram matrix
 * (the smaller of a^T a and a a^T), by Householder tridiagonalization and
 * the implicit QL algorithm with Wilkinson shifts (Golub and Van Loan,
 * "Matrix Computations", 4th ed., algorithms 8.3.1 and 8.3.3; Bowdler,
 * Martin, Reinsch and Wilkinson, "The QR and QL algorithms for symmetric
 * matrices", Numer. Math. 11, 1968).
 *
 * It costs about m n^2 + (4/3) n^3 flops for n = min(m, n), against the
 * several sweeps of n^2 / 2 rotations of length n that a one-sided Jacobi SVD
 * takes: on a 512 x 512 tile, a fraction of the time. The price is absolute,
 * not relative, accuracy: each value is within about n eps ||a||^2 of the
 * true one, so the smallest values are known only as "about 0". That is
 * what the L2 plan needs (tail energies measured against a budget many
 * orders of magnitude above that), and it needs the squares anyway.
 */
import { checkShape } from './shape.js';
import { exponentOf, maxAbs, mulPow2, scaleByPow2 } from './pow2.js';
import { singularValues } from './svd.js';

/** Most QL iterations per eigenvalue before giving up (they converge in 2 or 3 as a rule). */
const MAX_ITERATIONS = 60;

/**
 * The singular values of the row-major m x n matrix `a`, min(m, n) of them,
 * in decreasing order, each >= 0, from the eigenvalues of its Gram matrix
 * (so with the absolute accuracy stated above; from the Jacobi SVD of
 * src/linalg/svd.ts in the unexpected case that the eigenvalue iteration
 * does not converge). NaN throughout when `a`
 * holds a NaN or an infinity; zeros when it is all zero.
 */
export function gramSingularValues(a: Float64Array, m: number, n: number): Float64Array {
  checkShape(a.length, m, n, 'gramSingularValues');
  const k = Math.min(m, n);
  const out = new Float64Array(k);
  if (k === 0) return out;
  const amax = maxAbs(a);
  if (amax !== amax) return out.fill(NaN);
  if (amax === 0) return out;
  // Scale by a power of two so the Gram matrix neither overflows nor underflows; undone at the end.
  const e = exponentOf(amax);
  const scaled = new Float64Array(a.length);
  scaleByPow2(a, scaled, -e);
  const g = gram(scaled, m, n);
  const d = new Float64Array(k);
  const sub = new Float64Array(k);
  tridiagonalize(g, k, d, sub);
  // Should the iteration not converge, the Jacobi SVD's values (slower, never wrong).
  if (!symmetricTridiagonalEigenvalues(d, sub)) return singularValues(a, m, n);
  const sorted = Array.from(d, (x) => Math.max(0, x)).sort((p, q) => q - p);
  // The Gram matrix of a 2^-e is 2^-2e a^T a: its eigenvalues' square roots are the values 2^-e.
  for (let i = 0; i < k; i++) out[i] = mulPow2(Math.sqrt(sorted[i]), e);
  return out;
}

/** The k x k Gram matrix of `a` (k = min(m, n)): a^T a for a tall matrix, a a^T for a wide one, row-major. */
function gram(a: Float64Array, m: number, n: number): Float64Array {
  if (m >= n) {
    // a^T a accumulated row by row of a: g[p][q] += a[i][p] a[i][q] for q >= p.
    const g = new Float64Array(n * n);
    for (let i = 0; i < m; i++) {
      const o = i * n;
      for (let p = 0; p < n; p++) {
        const x = a[o + p];
        if (x === 0) continue;
        const gp = p * n;
        for (let q = p; q < n; q++) g[gp + q] += x * a[o + q];
      }
    }
    for (let p = 0; p < n; p++) for (let q = 0; q < p; q++) g[p * n + q] = g[q * n + p];
    return g;
  }
  // a a^T: dot products of the rows.
  const s = a;
  const g = new Float64Array(m * m);
  for (let p = 0; p < m; p++) {
    const op = p * n;
    for (let q = p; q < m; q++) {
      const oq = q * n;
      let acc = 0;
      for (let j = 0; j < n; j++) acc += s[op + j] * s[oq + j];
      g[p * m + q] = acc;
      g[q * m + p] = acc;
    }
  }
  return g;
}

/**
 * Householder reduction of the symmetric k x k row-major `g` (overwritten)
 * to tridiagonal form: diagonal into `d`, subdiagonal into `sub[0..k-2]`
 * (sub[i] couples rows i and i + 1; sub[k-1] = 0).
 */
function tridiagonalize(g: Float64Array, k: number, d: Float64Array, sub: Float64Array): void {
  const v = new Float64Array(k);
  const w = new Float64Array(k);
  for (let c = 0; c < k - 2; c++) {
    // x = g[c+1.., c]; reflect it onto -sign(x0) ||x|| e1.
    let norm2 = 0;
    for (let i = c + 1; i < k; i++) norm2 += g[i * k + c] * g[i * k + c];
    const x0 = g[(c + 1) * k + c];
    if (norm2 === 0) {
      sub[c] = 0;
      continue;
    }
    const alpha = x0 >= 0 ? -Math.sqrt(norm2) : Math.sqrt(norm2);
    // v = x - alpha e1, beta = 2 / (v^T v) = 1 / (norm2 - alpha x0).
    for (let i = c + 1; i < k; i++) v[i] = g[i * k + c];
    v[c + 1] = x0 - alpha;
    const beta = 1 / (norm2 - alpha * x0);
    // p = beta B v over the trailing block B = g[c+1.., c+1..]; w = p - (beta p^T v / 2) v.
    let pv = 0;
    for (let i = c + 1; i < k; i++) {
      const o = i * k;
      let acc = 0;
      for (let j = c + 1; j < k; j++) acc += g[o + j] * v[j];
      w[i] = beta * acc;
      pv += w[i] * v[i];
    }
    const half = (beta * pv) / 2;
    for (let i = c + 1; i < k; i++) w[i] -= half * v[i];
    // B -= v w^T + w v^T.
    for (let i = c + 1; i < k; i++) {
      const o = i * k;
      const vi = v[i];
      const wi = w[i];
      for (let j = c + 1; j < k; j++) g[o + j] -= vi * w[j] + wi * v[j];
    }
    sub[c] = alpha;
  }
  for (let i = 0; i < k; i++) d[i] = g[i * k + i];
  if (k >= 2) sub[k - 2] = g[(k - 1) * k + k - 2];
  sub[k - 1] = 0;
}

/**
 * Eigenvalues of the symmetric tridiagonal matrix with diagonal `d` and
 * subdiagonal `sub` (sub[i] couples i and i + 1), into `d`, unsorted; `sub`
 * is destroyed. Implicit QL with Wilkinson's shift, deflating where a
 * subdiagonal entry falls below eps times its neighbours. False if an
 * eigenvalue does not converge.
 */
function symmetricTridiagonalEigenvalues(d: Float64Array, sub: Float64Array): boolean {
  const k = d.length;
  const eps = Number.EPSILON;
  // Entries below eps times the matrix's norm are negligible too: only absolute accuracy is asked
  // for, and without this floor a cluster of eigenvalues near 0 (a rank-deficient tile) can keep
  // a relative test from ever passing.
  let norm = 0;
  for (let i = 0; i < k; i++) norm = Math.max(norm, Math.abs(d[i]) + Math.abs(sub[i]) + (i > 0 ? Math.abs(sub[i - 1]) : 0));
  const floor = eps * norm;
  for (let l = 0; l < k; l++) {
    for (let iter = 0; ; iter++) {
      // The first negligible subdiagonal entry at or after l bounds the unreduced block l..m.
      let m = l;
      for (; m < k - 1; m++) {
        const dd = Math.abs(d[m]) + Math.abs(d[m + 1]);
        if (Math.abs(sub[m]) <= eps * dd || Math.abs(sub[m]) <= floor) break;
      }
      if (m === l) break;
      if (iter === MAX_ITERATIONS) return false;
      // Wilkinson shift from the leading 2 x 2 block, then chase the bulge from m up to l.
      let g = (d[l + 1] - d[l]) / (2 * sub[l]);
      let r = Math.hypot(g, 1);
      g = d[m] - d[l] + sub[l] / (g + (g >= 0 ? r : -r));
      let s = 1;
      let c = 1;
      let p = 0;
      let i = m - 1;
      let early = false;
      for (; i >= l; i--) {
        const f = s * sub[i];
        const b = c * sub[i];
        r = Math.hypot(f, g);
        sub[i + 1] = r;
        if (r === 0) {
          // Deflation inside the sweep: undo the last shift and start again.
          d[i + 1] -= p;
          sub[m] = 0;
          early = true;
          break;
        }
        s = f / r;
        c = g / r;
        g = d[i + 1] - p;
        r = (d[i] - g) * s + 2 * c * b;
        p = s * r;
        d[i + 1] = g + p;
        g = c * r - b;
      }
      if (early) continue;
      d[l] -= p;
      sub[l] = g;
      sub[m] = 0;
    }
  }
  return true;
}
