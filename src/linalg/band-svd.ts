/**
 * Truncated SVD of a matrix read a band of rows at a time, never held whole:
 * the randomized range finder with subspace iteration of Halko, Martinsson
 * and Tropp, "Finding structure with randomness", SIAM Review 53(2), 2011
 * (Algorithm 4.4 for the range, Algorithm 5.1 for the SVD of the projected
 * matrix), each product with the matrix made as one pass over its bands.
 * The in-memory version is truncated.ts's; this one shares its Gaussian
 * sketch (same fixed seed), its blocked product and its orthonormalization.
 * Memory: the sketches, (rows + cols) x (k + oversampling) doubles, and one band.
 */
import { InputCode, InputError } from '../errors.js';
import { svd } from './svd.js';
import { matrixProducts } from './product.js';
import { gaussian, orthonormalize, OVERSAMPLE } from './truncated.js';

/** A rows x cols matrix served in bands of whole rows (row-major binary64), visited in increasing row order. */
export interface BandMatrix {
  rows: number;
  cols: number;
  /** Call `visit` for consecutive bands covering every row once, in order; `values` may be reused after the call. */
  bands(visit: (r0: number, count: number, values: Float64Array) => void): void;
}

/** The leading k singular triplets: `u` rows x k and `v` cols x k row-major, `s` descending. */
export interface BandSvd {
  k: number;
  u: Float64Array;
  s: Float64Array;
  v: Float64Array;
}

/**
 * Leading `k` singular triplets of `a` (k in 1..min(rows, cols)) by the
 * randomized range finder with `power` subspace iterations (each costs two
 * passes over the bands; the sketch one, and B = Q^T A one more): 2 +
 * 2 x power passes. Deterministic: a fixed-seed sketch and a fixed order of
 * every sum. The caller scales the values so that their squares neither
 * overflow nor underflow (entries of order 1).
 */
export function bandTruncatedSvd(a: BandMatrix, k: number, power = 1): BandSvd {
  const { rows: m, cols: n } = a;
  const full = Math.min(m, n);
  if (!Number.isInteger(k) || k < 1 || k > full) throw new InputError(InputCode.Option, `bandTruncatedSvd: rank ${k} must be an integer in 1..${full} for a ${m} x ${n} matrix`);
  const l = Math.min(k + OVERSAMPLE, full);
  // Column-major sketches: g and z (n x l), y and q (m x l).
  const g = new Float64Array(n * l);
  const y = new Float64Array(m * l);
  const q = new Float64Array(m * l);
  const z = new Float64Array(n * l);
  const tau = new Float64Array(l);
  gaussian(g);
  timesA(a, g, l, y);
  orthonormalize(y, m, l, q, tau);
  for (let it = 0; it < power; it++) {
    timesAt(a, q, l, z);
    orthonormalize(z, n, l, g, tau);
    timesA(a, g, l, y);
    orthonormalize(y, m, l, q, tau);
  }
  // z = A^T Q, n x l column-major: B = Q^T A as l x n row-major.
  timesAt(a, q, l, z);
  const fb = svd(z, l, n);
  const kb = fb.k;
  const u = new Float64Array(m * k);
  for (let i = 0; i < m; i++) {
    for (let t = 0; t < l; t++) {
      const qt = q[t * m + i];
      if (qt === 0) continue;
      for (let c = 0; c < k; c++) u[i * k + c] += qt * fb.u[t * kb + c];
    }
  }
  const v = new Float64Array(n * k);
  for (let j = 0; j < n; j++) for (let c = 0; c < k; c++) v[j * k + c] = fb.v[j * kb + c];
  return { k, u, s: fb.s.slice(0, k), v };
}

/** y = A g (g column-major cols x l, y column-major rows x l), one pass over the bands. */
function timesA(a: BandMatrix, g: Float64Array, l: number, y: Float64Array): void {
  const m = a.rows;
  let part = new Float64Array(0);
  a.bands((r0, count, values) => {
    if (part.length < count * l) part = new Float64Array(count * l);
    const prod = matrixProducts(values, count, a.cols, l, false);
    prod.times(g, part);
    prod.done();
    for (let c = 0; c < l; c++) y.set(part.subarray(c * count, (c + 1) * count), c * m + r0);
  });
}

/** z = A^T q (q column-major rows x l, z column-major cols x l), one pass over the bands, summed band by band in row order. */
function timesAt(a: BandMatrix, q: Float64Array, l: number, z: Float64Array): void {
  const { rows: m, cols: n } = a;
  z.fill(0);
  a.bands((r0, count, values) => {
    for (let c = 0; c < l; c++) {
      const zc = c * n;
      for (let i = 0; i < count; i++) {
        const w = q[c * m + r0 + i];
        if (w === 0) continue;
        const row = i * n;
        for (let j = 0; j < n; j++) z[zc + j] += values[row + j] * w;
      }
    }
  });
}
