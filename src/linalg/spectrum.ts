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
import { gramTridiagonalKernel } from '../wasm/gram.js';

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
  const d = new Float64Array(k);
  const sub = new Float64Array(k);
  // The WebAssembly kernels where they are to be had (the same values; src/wasm/gram.ts).
  if (!gramTridiagonalKernel(scaled, m, n, d, sub)) tridiagonalize(gram(scaled, m, n), k, d, sub);
  // Should the iteration not converge, the Jacobi SVD's values (slower, never wrong).
  if (!symmetricTridiagonalEigenvalues(d, sub)) return singularValues(a, m, n);
  const sorted = Array.from(d, (x) => Math.max(0, x)).sort((p, q) => q - p);
  // The Gram matrix of a 2^-e is 2^-2e a^T a: its eigenvalues' square roots are the values 2^-e.
  for (let i = 0; i < k; i++) out[i] = mulPow2(Math.sqrt(sorted[i]), e);
  return out;
}

/** Side of the square blocks of the Gram matrix accumulated at a time (a 64 x 64 block of doubles, 32 KiB, stays in the L1/L2 cache). */
const GRAM_BLOCK = 64;

/**
 * The k x k Gram matrix of `a` (k = min(m, n)): a^T a for a tall matrix, a a^T
 * for a wide one, row-major. Every entry is its sum of products in
 * increasing order of the summed index (the blocking and the rows or
 * pairs taken several at a time only reorder which entries are worked on, never the
 * additions within one), so the result does not depend on the blocking.
 */
export function gram(a: Float64Array, m: number, n: number): Float64Array {
  if (m >= n) {
    // a^T a: g[p][q] = sum over rows i of a[i][p] a[i][q], for q >= p, a block of g at a time over every
    // row of a, four rows per pass (((g + x0 y0) + x1 y1) + ...: the additions of one row after the other).
    const g = new Float64Array(n * n);
    for (let p0 = 0; p0 < n; p0 += GRAM_BLOCK) {
      const p1 = Math.min(n, p0 + GRAM_BLOCK);
      for (let q0 = p0; q0 < n; q0 += GRAM_BLOCK) {
        const q1 = Math.min(n, q0 + GRAM_BLOCK);
        let i = 0;
        for (; i + 3 < m; i += 4) {
          const o = i * n;
          const o1 = o + n;
          const o2 = o1 + n;
          const o3 = o2 + n;
          for (let p = p0; p < p1; p++) {
            const x0 = a[o + p];
            const x1 = a[o1 + p];
            const x2 = a[o2 + p];
            const x3 = a[o3 + p];
            const gp = p * n;
            for (let q = q0 > p ? q0 : p; q < q1; q++) g[gp + q] = g[gp + q] + x0 * a[o + q] + x1 * a[o1 + q] + x2 * a[o2 + q] + x3 * a[o3 + q];
          }
        }
        for (; i < m; i++) {
          const o = i * n;
          for (let p = p0; p < p1; p++) {
            const x = a[o + p];
            const gp = p * n;
            for (let q = q0 > p ? q0 : p; q < q1; q++) g[gp + q] += x * a[o + q];
          }
        }
      }
    }
    for (let p = 0; p < n; p++) for (let q = 0; q < p; q++) g[p * n + q] = g[q * n + p];
    return g;
  }
  // a a^T: dot products of the rows, two at a time (each its own sum, in column order).
  const g = new Float64Array(m * m);
  for (let p = 0; p < m; p++) {
    const op = p * n;
    let q = p;
    for (; q + 1 < m; q += 2) {
      const oq = q * n;
      const or = oq + n;
      let acc = 0;
      let acc1 = 0;
      for (let j = 0; j < n; j++) {
        const x = a[op + j];
        acc += x * a[oq + j];
        acc1 += x * a[or + j];
      }
      g[p * m + q] = acc;
      g[q * m + p] = acc;
      g[p * m + q + 1] = acc1;
      g[(q + 1) * m + p] = acc1;
    }
    if (q < m) {
      const oq = q * n;
      let acc = 0;
      for (let j = 0; j < n; j++) acc += a[op + j] * a[oq + j];
      g[p * m + q] = acc;
      g[q * m + p] = acc;
    }
  }
  return g;
}

/**
 * The Householder vector of step c of {@link tridiagonalize} from column c of
 * the trailing block, x = col[c+1..k-1] (col[i] the entry of row i): v = x -
 * alpha e1 into v[c+1..], with alpha = -sign(x0) ||x||; returns alpha and
 * beta = 2 / (v^T v) = 1 / (norm2 - alpha x0), or null when x = 0.
 */
function reflector(col: (i: number) => number, c: number, k: number, v: Float64Array): { alpha: number; beta: number } | null {
  let norm2 = 0;
  for (let i = c + 1; i < k; i++) {
    const x = col(i);
    norm2 += x * x;
  }
  if (norm2 === 0) return null;
  const x0 = col(c + 1);
  const alpha = x0 >= 0 ? -Math.sqrt(norm2) : Math.sqrt(norm2);
  for (let i = c + 1; i < k; i++) v[i] = col(i);
  v[c + 1] = x0 - alpha;
  return { alpha, beta: 1 / (norm2 - alpha * x0) };
}

/**
 * Householder reduction of the symmetric k x k row-major `g` (overwritten)
 * to tridiagonal form: diagonal into `d`, subdiagonal into `sub[0..k-2]`
 * (sub[i] couples rows i and i + 1; sub[k-1] = 0). Step c reflects column c
 * below the diagonal onto a multiple of e1, with p = beta B v over the
 * trailing block B = g[c+1.., c+1..], w = p - (beta p^T v / 2) v, and B -=
 * v w^T + w v^T (Golub and Van Loan, algorithm 8.3.1).
 *
 * Only the lower triangle is read and updated (B stays exactly symmetric:
 * entry (i, j) and (j, i) are updated by the same two products added in
 * either order, and IEEE addition and multiplication are commutative), and
 * the product B v of step c + 1 is formed in the same pass as step c's
 * update, row by row as each row is updated (its reflector comes from
 * column c + 1, updated first): a quarter of the memory traffic of two
 * passes over the whole block. Every sum of B v still runs in increasing
 * column order, as in the plain algorithm, so the result is the same bit
 * for bit (see {@link lowerProduct}).
 */
export function tridiagonalize(g: Float64Array, k: number, d: Float64Array, sub: Float64Array): void {
  let v = new Float64Array(k);
  let vNext = new Float64Array(k);
  const w = new Float64Array(k);
  // acc[i]: row i of B v, when `ready` (formed by the previous step's pass).
  const acc = new Float64Array(k);
  const col = new Float64Array(k);
  let ready = false;
  let step = k >= 3 ? reflector((i) => g[i * k], 0, k, v) : null;
  for (let c = 0; c < k - 2; c++) {
    if (step === null) {
      sub[c] = 0;
      ready = false;
      if (c + 1 < k - 2) step = reflector((i) => g[i * k + c + 1], c + 1, k, v);
      continue;
    }
    const { alpha, beta } = step;
    if (!ready) lowerProduct(g, k, c + 1, v, null, v, acc);
    let pv = 0;
    for (let i = c + 1; i < k; i++) {
      w[i] = beta * acc[i];
      pv += w[i] * v[i];
    }
    const half = (beta * pv) / 2;
    for (let i = c + 1; i < k; i++) w[i] -= half * v[i];
    // The next step's reflector, from column c + 1 as this step's update leaves it.
    let next: { alpha: number; beta: number } | null = null;
    const c1 = c + 1;
    if (c1 < k - 2) {
      const vc1 = v[c1];
      const wc1 = w[c1];
      for (let i = c1 + 1; i < k; i++) col[i] = g[i * k + c1] - (v[i] * wc1 + w[i] * vc1);
      next = reflector((i) => col[i], c1, k, vNext);
    }
    // Row and column c + 1 have no part in the next step's product: updated on their own.
    for (let i = c1; i < k; i++) g[i * k + c1] -= v[i] * w[c1] + w[i] * v[c1];
    lowerProduct(g, k, c + 2, v, w, next === null ? null : vNext, acc);
    sub[c] = alpha;
    step = next;
    ready = next !== null;
    const t = v;
    v = vNext;
    vNext = t;
  }
  for (let i = 0; i < k; i++) d[i] = g[i * k + i];
  if (k >= 2) sub[k - 2] = g[(k - 1) * k + k - 2];
  sub[k - 1] = 0;
}

/**
 * Over the lower triangle of the block of rows and columns from..k-1 of the
 * symmetric `g`: when `w` is given, first the update g[i][j] -= v[i] w[j] +
 * w[i] v[j]; then, when `x` is given, acc = B x over the block. Row i gives the terms j <= i
 * of its own sum and, through g[i][j] = g[j][i], term i of the sums of the
 * rows j < i, which rows from..i-1 have already started: every sum runs in
 * increasing order of j, as a product over whole rows does.
 */
function lowerProduct(g: Float64Array, k: number, from: number, v: Float64Array, w: Float64Array | null, x: Float64Array | null, acc: Float64Array): void {
  let i = from;
  // Update and product, two rows at a time (two sums side by side; each term of acc[j] still added in row order).
  for (; w !== null && x !== null && i + 1 < k; i += 2) {
    const o = i * k;
    const o1 = o + k;
    const vi = v[i];
    const wi = w[i];
    const vi1 = v[i + 1];
    const wi1 = w[i + 1];
    const xi = x[i];
    const xi1 = x[i + 1];
    let s = 0;
    let s1 = 0;
    for (let j = from; j < i; j++) {
      const wj = w[j];
      const vj = v[j];
      const xj = x[j];
      const y = g[o + j] - (vi * wj + wi * vj);
      const z = g[o1 + j] - (vi1 * wj + wi1 * vj);
      g[o + j] = y;
      g[o1 + j] = z;
      s += y * xj;
      s1 += z * xj;
      acc[j] = acc[j] + y * xi + z * xi1;
    }
    const y = g[o + i] - (vi * w[i] + wi * v[i]);
    g[o + i] = y;
    acc[i] = s + y * xi;
    const z = g[o1 + i] - (vi1 * w[i] + wi1 * v[i]);
    g[o1 + i] = z;
    s1 += z * x[i];
    acc[i] += z * xi1;
    const zz = g[o1 + i + 1] - (vi1 * w[i + 1] + wi1 * v[i + 1]);
    g[o1 + i + 1] = zz;
    acc[i + 1] = s1 + zz * xi1;
  }
  for (; i < k; i++) {
    const o = i * k;
    if (w !== null) {
      const vi = v[i];
      const wi = w[i];
      if (x === null) {
        for (let j = from; j <= i; j++) g[o + j] -= vi * w[j] + wi * v[j];
        continue;
      }
      const xi = x[i];
      let s = 0;
      for (let j = from; j < i; j++) {
        const y = g[o + j] - (vi * w[j] + wi * v[j]);
        g[o + j] = y;
        s += y * x[j];
        acc[j] += y * xi;
      }
      const y = g[o + i] - (vi * w[i] + wi * v[i]);
      g[o + i] = y;
      acc[i] = s + y * xi;
      continue;
    }
    if (x === null) continue;
    const xi = x[i];
    let s = 0;
    for (let j = from; j < i; j++) {
      const y = g[o + j];
      s += y * x[j];
      acc[j] += y * xi;
    }
    acc[i] = s + g[o + i] * xi;
  }
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
