/**
 * Solver for small symmetric positive (semi)definite systems.
 */

import { exponentOf, maxAbs, mulPow2, scaleByPow2 } from './pow2.js';
import { checkShape } from './shape.js';

/** Scratch for the Cholesky factor, grown on demand (the solver is not reentrant). */
let cholScratch = new Float64Array(0);

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
 * @throws InputError (code `shape`) if r or nrhs is not a positive integer
 *   or an array length does not match.
 */
export function solveSpd(g: Float64Array, r: number, b: Float64Array, nrhs: number): void {
  checkShape(g.length, r, r, 'solveSpd g');
  checkShape(b.length, r, nrhs, 'solveSpd b');
  // maxAbs is NaN when an entry is not finite.
  const gmax = maxAbs(g);
  const bmax = maxAbs(b);
  if (gmax !== gmax || bmax !== bmax) {
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

