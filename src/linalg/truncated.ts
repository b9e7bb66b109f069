/**
 * Truncated SVD by the randomized range finder with subspace (power)
 * iteration: Halko, Martinsson and Tropp, "Finding structure with
 * randomness: probabilistic algorithms for constructing approximate matrix
 * decompositions", SIAM Review 53(2), 2011 (Algorithm 4.4 for the range,
 * Algorithm 5.1 for the SVD of the projected matrix). Flat row-major and
 * column-major Float64Arrays throughout; deterministic (fixed-seed sketch).
 */

import { InputCode, InputError } from '../errors.js';
import { exponentOf, maxAbs, mulPow2, scaleByPow2 } from './pow2.js';
import { householder, reflect, sumSquares } from './householder.js';
import { checkShape } from './shape.js';
import { matrixProducts } from './product.js';
import { svd, type Svd } from './svd.js';

/** Oversampling p: the sketch has k + p columns. */
export const OVERSAMPLE = 8;
/** Number q of power (subspace) iterations. */
export const POWER_ITERATIONS = 2;
/** Seed of the Gaussian test matrix; fixed so that results are reproducible. */
const SEED = 0x2545f491;

/**
 * Leading k singular triplets of a row-major m x n matrix (k <= min(m, n));
 * same layout as Svd but with k columns. Deterministic (fixed-seed sketch).
 * Also returns the Frobenius norm squared of a, so callers know the energy
 * left beyond k: frob2 - sum(s^2).
 *
 * Result: `k` is the requested rank; `u` is m x k and `v` is n x k,
 * row-major; `s` has k entries, descending and >= 0. As in {@link Svd},
 * columns with `s[j] > 0` are orthonormal (to about 1e-14) and columns with
 * `s[j] === 0` are zero. `a` is not modified.
 *
 * Method. Let l = k + p with p = {@link OVERSAMPLE}. If l >= min(m, n) the
 * full {@link svd} is computed and truncated to k (its guarantees carry
 * over). Otherwise `a` is scaled by a power of two near its max-abs entry
 * (so squares and products cannot overflow or underflow), multiplied by an
 * n x l Gaussian test matrix Omega drawn from mulberry32 with a fixed seed,
 * and the range is refined by q = {@link POWER_ITERATIONS} subspace
 * iterations, Y <- A (A^T Y), with an orthonormal basis taken by Householder
 * QR after every multiply. With Q the final m x l basis, B = Q^T A is
 * factored by {@link svd}, U = Q U_B, and everything is truncated to k.
 *
 * What the result satisfies in the sketch case:
 * - u diag(s) v^T = u u^T a in exact arithmetic (u u^T is an orthogonal
 *   projector), so ||a - u diag(s) v^T||_F^2 = frob2 - sum(s^2). Computed in
 *   floating point, that difference carries an absolute error of about
 *   k * 2^-52 * frob2: it can come out slightly negative (clamp at 0), and a
 *   tail energy below about 1e-15 * frob2 cannot be resolved this way.
 * - s[j] <= sigma_j(a) up to rounding (singular values of Q^T a).
 * - Accuracy depends on the spectrum: the error in sigma_j, and the excess
 *   of the truncation error over the Eckart-Young-Mirsky optimum, shrink
 *   roughly like (sigma_{l+1} / sigma_j)^(2q+1). For fast-decaying spectra (smooth
 *   fields) the leading values match the full SVD to about 1e-11 relative,
 *   or to about 2^-52 * s[0] absolute where sigma_j nears rounding level;
 *   where the spectrum is flat (e.g. a float32 rounding floor) the values
 *   there are less accurate, but the rank-k approximation stays close to
 *   optimal: on average over the sketch, within the expected-error bound of
 *   Halko, Martinsson and Tropp (their Corollary 10.10 with Theorem 9.3).
 *
 * Special inputs, as in {@link svd}: a zero matrix gives all-zero u, s, v
 * and frob2 = 0. If `a` contains NaN or +-Infinity, every entry of u, s, v
 * and frob2 is NaN. Finite entries anywhere in the float64 range work,
 * subnormals included; a singular value whose true value exceeds
 * Number.MAX_VALUE is returned as Infinity. frob2 (like s^2) leaves the
 * float64 range sooner: it is Infinity once ||a||_F exceeds about 1e154 and
 * may underflow (to 0 below about 1e-162), so callers with such data should
 * scale before using the energy formula.
 *
 * Omega depends on Math.log, Math.cos and Math.sin (Box-Muller). Results are
 * bit-identical run to run on a given JavaScript engine; ECMAScript does not
 * require those functions to be correctly rounded, so another engine could
 * draw a different Omega.
 *
 * @throws InputError (code `shape`) if m or n is not a positive integer or
 *   `a.length !== m * n`; InputError (code `option`) if k is not an integer
 *   in 1..min(m, n).
 */
export function truncatedSvd(a: Float64Array, m: number, n: number, k: number): Svd & { frob2: number } {
  checkShape(a.length, m, n, 'truncatedSvd');
  const kmax = Math.min(m, n);
  if (!Number.isInteger(k) || k < 1 || k > kmax) {
    throw new InputError(InputCode.Option, `truncatedSvd: rank ${k} must be an integer in 1..${kmax} for a ${m} x ${n} matrix`);
  }
  const u = new Float64Array(m * k);
  const s = new Float64Array(k);
  const v = new Float64Array(n * k);

  const amax = maxAbs(a);
  if (amax !== amax) {
    u.fill(NaN);
    s.fill(NaN);
    v.fill(NaN);
    return { m, n, k, u, s, v, frob2: NaN };
  }
  if (amax === 0) return { m, n, k, u, s, v, frob2: 0 };
  const e = exponentOf(amax);

  // Row-major working copy of a, scaled by 2^-e (entries O(1)), and the sum of squares from it.
  let frob2 = NaN;
  const scaled = (w: Float64Array): void => {
    scaleByPow2(a, w, -e);
    frob2 = mulPow2(sumSquares(w, 0, m * n), 2 * e);
  };

  const l = k + OVERSAMPLE;
  if (l >= kmax) {
    scaled(new Float64Array(m * n));
    const full = svd(a, m, n);
    const fk = full.k;
    for (let i = 0; i < m; i++) for (let c = 0; c < k; c++) u[i * k + c] = full.u[i * fk + c];
    for (let j = 0; j < n; j++) for (let c = 0; c < k; c++) v[j * k + c] = full.v[j * fk + c];
    for (let c = 0; c < k; c++) s[c] = full.s[c];
    return { m, n, k, u, s, v, frob2 };
  }

  // Column-major sketch buffers: g (n x l), y and q (m x l), z (n x l).
  const g = new Float64Array(n * l);
  const y = new Float64Array(m * l);
  const q = new Float64Array(m * l);
  const z = new Float64Array(n * l);
  const tau = new Float64Array(l);
  gaussian(g, SEED);

  // Products with w and w^T; w is scaled straight into the WebAssembly kernel's memory where there is one.
  const prod = matrixProducts(scaled, m, n, l, true);
  try {
    // The orthonormalizations in the kernels' memory the products hold where they can be (the same bits).
    const orth = (x: Float64Array, rows: number, out: Float64Array) => prod.orthonormalize(x, rows, out, tau) || orthonormalize(x, rows, l, out, tau);
    prod.times(g, y);
    orth(y, m, q);
    for (let it = 0; it < POWER_ITERATIONS; it++) {
      prod.timesT(q, z);
      orth(z, n, g);
      prod.times(g, y);
      orth(y, m, q);
    }

    // z = A^T Q is n x l column-major, i.e. B = Q^T A as l x n row-major.
    prod.timesT(q, z);
  } finally {
    prod.done();
  }
  const fb = svd(z, l, n); // fb.k === l since l < n
  const ub = fb.u;
  for (let i = 0; i < m; i++) {
    const uo = i * k;
    for (let t = 0; t < l; t++) {
      const qt = q[t * m + i];
      if (qt === 0) continue;
      const bo = t * l;
      for (let c = 0; c < k; c++) u[uo + c] += qt * ub[bo + c];
    }
  }
  for (let j = 0; j < n; j++) for (let c = 0; c < k; c++) v[j * k + c] = fb.v[j * l + c];
  for (let c = 0; c < k; c++) s[c] = mulPow2(fb.s[c], e);
  return { m, n, k, u, s, v, frob2 };
}

/**
 * The deviates {@link gaussian} drew last with the default seed: the
 * stream is the same whatever the length asked for (entry i depends on i
 * alone), so a shorter request copies the start of it. Kept up to
 * {@link KEPT_DEVIATES} entries (2 MiB); Box-Muller's log, cos and sin were
 * 5% of the truncated SVDs' time in a profile of packs of annual-precip at
 * rel:1e-3 (each tile's search computes one, of the same n x 24 sketch).
 */
let kept = new Float64Array(0);
const KEPT_DEVIATES = 1 << 18;

/**
 * Fills `out` with standard normal deviates: mulberry32 uniforms seeded with
 * `seed`, turned into normals by the Box-Muller transform.
 */
export function gaussian(out: Float64Array, seed: number = SEED): void {
  if (seed === SEED && out.length <= kept.length) {
    out.set(kept.subarray(0, out.length));
    return;
  }
  draw(out, seed);
  if (seed === SEED && out.length <= KEPT_DEVIATES) kept = out.slice();
}

/** {@link gaussian}'s draw. */
function draw(out: Float64Array, seed: number): void {
  let st = seed >>> 0;
  const len = out.length;
  for (let i = 0; i < len; i += 2) {
    // mulberry32, two draws; u1 in (0, 1] so the log is finite.
    st = (st + 0x6d2b79f5) >>> 0;
    let t = st;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    const u1 = 1 - ((t ^ (t >>> 14)) >>> 0) / 4294967296;
    st = (st + 0x6d2b79f5) >>> 0;
    t = st;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    const u2 = ((t ^ (t >>> 14)) >>> 0) / 4294967296;
    const r = Math.sqrt(-2 * Math.log(u1));
    const th = 2 * Math.PI * u2;
    out[i] = r * Math.cos(th);
    if (i + 1 < len) out[i + 1] = r * Math.sin(th);
  }
}

/**
 * Writes into `q` (column-major rows x cols, rows >= cols) an orthonormal
 * basis containing the column space of `y` (same shape, destroyed): the
 * first cols columns of Q in the Householder QR y = Q R (unpivoted, LAPACK
 * dlarfg convention), formed explicitly as LAPACK dorg2r does. Q is a product
 * of reflectors, so its columns are orthonormal to rounding even when y is
 * rank-deficient or has exactly dependent columns (a reflector whose column
 * is already zero below the diagonal is the identity). `tau` is scratch of
 * length >= cols.
 */
export function orthonormalize(y: Float64Array, rows: number, cols: number, q: Float64Array, tau: Float64Array): void {
  for (let i = 0; i < cols; i++) {
    tau[i] = householder(y, rows, i);
    if (tau[i] !== 0) reflect(y, rows, i, tau[i], y, i + 1, cols);
  }
  // Q e_c = H_0 ... H_{cols-1} e_c, accumulated from the last reflector; when
  // H_i is applied, columns c < i are still e_c, which H_i leaves alone.
  q.fill(0);
  for (let c = 0; c < cols; c++) q[c * rows + c] = 1;
  for (let i = cols - 1; i >= 0; i--) if (tau[i] !== 0) reflect(y, rows, i, tau[i], q, i, cols);
}
