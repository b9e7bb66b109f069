import { Matrix, SingularValueDecomposition } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { InputError } from '../../src/errors.js';
import { gramSingularValues } from '../../src/linalg/spectrum.js';
import { mulberry32 } from '../rng.js';

/** Singular values from ml-matrix's SVD (reference library: Golub-Kahan-Reinsch, after JAMA), descending. */
function reference(a: Float64Array, m: number, n: number): number[] {
  const rows = Array.from({ length: m }, (_, i) => Array.from(a.subarray(i * n, (i + 1) * n)));
  return new SingularValueDecomposition(new Matrix(rows), { autoTranspose: true }).diagonal;
}

/** A sum of `rank` random outer products with weights 2^-k, plus `noise` times uniform noise. */
function lowRank(rng: () => number, m: number, n: number, rank: number, noise = 0): Float64Array {
  const a = new Float64Array(m * n);
  for (let k = 0; k < rank; k++) {
    const u = Array.from({ length: m }, () => rng() - 0.5);
    const v = Array.from({ length: n }, () => rng() - 0.5);
    for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) a[i * n + j] += u[i] * v[j] * 2 ** -k;
  }
  for (let c = 0; noise > 0 && c < a.length; c++) a[c] += noise * (rng() - 0.5);
  return a;
}

describe('gramSingularValues', () => {
  it('matches ml-matrix within n eps ||a||^2 on the squares, full rank and rank-deficient, tall and wide', () => {
    const rng = mulberry32(7);
    for (const [m, n, rank, noise] of [
      [40, 30, 30, 0],
      [30, 40, 5, 0],
      [64, 64, 64, 0],
      [7, 120, 3, 0],
      [120, 7, 7, 1e-3],
      [1, 9, 1, 0],
      [9, 1, 1, 0],
      [96, 80, 4, 1e-9],
      // Across the Gram matrix's 64-wide blocks, odd and even orders (the row pairs and the last row alone).
      [150, 131, 131, 0],
      [131, 150, 20, 1e-6],
      [140, 130, 130, 0],
    ]) {
      const a = lowRank(rng, m, n, rank, noise);
      const got = gramSingularValues(a, m, n);
      const ref = reference(a, m, n);
      expect(got.length).toBe(Math.min(m, n));
      // Eigenvalues of the Gram matrix carry an absolute error of about n eps ||a||_2^2
      // (Golub and Van Loan, Matrix Computations, 4th ed., section 8.1, Weyl's theorem; from memory).
      const slack = 64 * Math.max(m, n) * Number.EPSILON * ref[0] * ref[0];
      for (let k = 0; k < got.length; k++) {
        expect(Math.abs(got[k] * got[k] - ref[k] * ref[k]), `${m}x${n} rank ${rank}, value ${k}`).toBeLessThanOrEqual(slack);
        if (k > 0) expect(got[k]).toBeLessThanOrEqual(got[k - 1]);
        expect(got[k]).toBeGreaterThanOrEqual(0);
      }
    }
  });

  it('matches ml-matrix when the Gram matrix is already (block) diagonal, so reflections are skipped', () => {
    const rng = mulberry32(17);
    // Orthogonal columns (disjoint supports): a diagonal Gram matrix; then two groups of columns on disjoint
    // rows: a block-diagonal one, whose reflections vanish part of the way.
    for (const [m, n, kind] of [
      [40, 30, 'diagonal'],
      [90, 70, 'blocks'],
    ] as const) {
      const a = new Float64Array(m * n);
      for (let i = 0; i < m; i++) {
        for (let j = 0; j < n; j++) {
          if (kind === 'diagonal' ? i === j : i < m / 2 === j % 4 < 2) a[i * n + j] = rng() - 0.5;
        }
      }
      const got = gramSingularValues(a, m, n);
      const ref = reference(a, m, n);
      // The same bound as above (Golub and Van Loan, section 8.1; from memory).
      const slack = 64 * Math.max(m, n) * Number.EPSILON * ref[0] * ref[0];
      for (let k = 0; k < got.length; k++) expect(Math.abs(got[k] * got[k] - ref[k] * ref[k]), `${kind}, value ${k}`).toBeLessThanOrEqual(slack);
    }
  });

  it('keeps its scale from 1e-300 to 1e300 (a power-of-two scaling is undone exactly)', () => {
    const rng = mulberry32(11);
    const a = lowRank(rng, 20, 12, 12);
    const base = gramSingularValues(a, 20, 12);
    for (const e of [-990, -500, 500, 990]) {
      const scaled = a.map((x) => x * 2 ** e);
      const got = gramSingularValues(scaled, 20, 12);
      // Scaling a matrix by 2^e scales its singular values by 2^e (the SVD's homogeneity, from memory).
      for (let k = 0; k < 12; k++) expect(Math.abs(got[k] / 2 ** e - base[k])).toBeLessThanOrEqual(1e-12 * base[0]);
    }
  });

  it('sums its squares to the Frobenius norm squared (the trace of the Gram matrix; from memory)', () => {
    const rng = mulberry32(13);
    const a = lowRank(rng, 200, 150, 150, 0.1);
    let frob = 0;
    for (const x of a) frob += x * x;
    let sum = 0;
    for (const s of gramSingularValues(a, 200, 150)) sum += s * s;
    expect(Math.abs(sum - frob)).toBeLessThanOrEqual(1e-12 * frob);
  });

  it('gives zeros for a zero matrix, NaN for a non-finite one, and refuses a wrong shape', () => {
    expect(Array.from(gramSingularValues(new Float64Array(6), 2, 3))).toEqual([0, 0]);
    expect(Array.from(gramSingularValues(Float64Array.of(1, Infinity, 0, 0), 2, 2)).every(Number.isNaN)).toBe(true);
    expect(Array.from(gramSingularValues(Float64Array.of(1, NaN, 0, 0), 2, 2)).every(Number.isNaN)).toBe(true);
    expect(() => gramSingularValues(new Float64Array(5), 2, 3)).toThrow(InputError);
  });
});
