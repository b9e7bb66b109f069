/**
 * Solver for small symmetric positive (semi)definite systems.
 */

import { exponentOf, maxAbs, mulPow2, scaleByPow2 } from './pow2.js';
import { checkShape } from './shape.js';

/**
 * A factorization of a symmetric positive (semi)definite r x r matrix g
 * for {@link solveFactored}: the lower Cholesky factor `l` of g scaled by
 * 2^-eg (a ridge added where needed, see {@link solveSpd}), or the kind of
 * g that has none (an entry not finite, or g all zeros).
 */
export interface SpdFactor {
  r: number;
  kind: 'cholesky' | 'nan' | 'zero';
  eg: number;
  l: Float64Array;
}

/** The factor {@link solveSpd} makes and uses at once (the solver is not reentrant). */
const scratch: SpdFactor = { r: 0, kind: 'zero', eg: 0, l: new Float64Array(0) };

/**
 * Solves the symmetric positive (semi)definite system g x = b for `nrhs`
 * right-hand sides. `g` is r x r row-major, assumed symmetric (the
 * factorization uses its lower triangle), and is not modified; `b` is
 * r x nrhs row-major and is overwritten by x.
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
 * The same as {@link factorSpd} then {@link solveFactored}: a caller that
 * solves with one g many times may factor it once, for the same bits.
 *
 * @throws InputError (code `shape`) if r or nrhs is not a positive integer
 *   or an array length does not match.
 */
export function solveSpd(g: Float64Array, r: number, b: Float64Array, nrhs: number): void {
  solveFactored(factorSpd(g, r, scratch), b, nrhs);
}

/**
 * The factorization of g (r x r, row-major, its lower triangle used) that
 * {@link solveSpd} solves with, into `into` (its `l` grown on demand) or a
 * new one. g is not modified.
 *
 * @throws InputError (code `shape`) if r is not a positive integer or g is not r x r.
 */
export function factorSpd(g: Float64Array, r: number, into?: SpdFactor): SpdFactor {
  checkShape(g.length, r, r, 'solveSpd g');
  const f = into ?? { r, kind: 'zero', eg: 0, l: new Float64Array(r * r) };
  f.r = r;
  // maxAbs is NaN when an entry is not finite.
  const gmax = maxAbs(g);
  if (gmax !== gmax) {
    f.kind = 'nan';
    return f;
  }
  if (gmax === 0) {
    f.kind = 'zero';
    return f;
  }
  const eg = exponentOf(gmax);
  if (f.l.length < r * r) f.l = new Float64Array(r * r);
  const l = f.l;
  f.kind = 'cholesky';
  f.eg = eg;

  let trace = 0;
  for (let i = 0; i < r; i++) trace += mulPow2(g[i * r + i], -eg);
  const base = Math.max(trace, 0.5) / r; // for PSD g, trace >= max entry, which is about 1 here
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
  return f;
}

/**
 * Overwrites `b` (r x nrhs, row-major) by the solution x of g x = b, with g
 * factored by {@link factorSpd}: what {@link solveSpd} gives, bit for bit.
 *
 * @throws InputError (code `shape`) if nrhs is not a positive integer or b is not r x nrhs.
 */
export function solveFactored(fac: SpdFactor, b: Float64Array, nrhs: number): void {
  const r = fac.r;
  checkShape(b.length, r, nrhs, 'solveSpd b');
  const bmax = maxAbs(b);
  if (fac.kind === 'nan' || bmax !== bmax) {
    b.fill(NaN);
    return;
  }
  if (fac.kind === 'zero' || bmax === 0) {
    b.fill(0);
    return;
  }
  const eb = exponentOf(bmax);
  const l = fac.l;
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
  scaleByPow2(b, b, eb - fac.eg);
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

