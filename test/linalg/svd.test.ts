import { Matrix, SingularValueDecomposition, solve } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { InputError } from '../../src/errors.js';
import { factorSpd, solveFactored, solveSpd } from '../../src/linalg/spd.js';
import { singularValues, svd, type Svd } from '../../src/linalg/svd.js';
import { mulberry32 } from '../rng.js';


function randomMatrix(m: number, n: number, seed: number): Float64Array {
  const rnd = mulberry32(seed);
  const a = new Float64Array(m * n);
  for (let i = 0; i < a.length; i++) a[i] = 2 * rnd() - 1;
  return a;
}

function toMl(a: Float64Array, m: number, n: number): Matrix {
  return Matrix.from1DArray(m, n, Array.from(a));
}

/** Singular values from ml-matrix (reference library), descending. */
function refSingularValues(a: Float64Array, m: number, n: number): number[] {
  const d = new SingularValueDecomposition(toMl(a, m, n), {
    autoTranspose: true,
    computeLeftSingularVectors: false,
    computeRightSingularVectors: false,
  }).diagonal;
  return d.slice().sort((x, y) => y - x);
}

function frob(a: ArrayLike<number>): number {
  let s = 0;
  for (let i = 0; i < a.length; i++) s += a[i] * a[i];
  return Math.sqrt(s);
}

/** u[:, :r] diag(s[:r]) v[:, :r]^T, row-major m x n. */
function rankR(d: Svd, r: number): Float64Array {
  const { m, n, k, u, s, v } = d;
  const out = new Float64Array(m * n);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      let x = 0;
      for (let c = 0; c < r; c++) x += u[i * k + c] * s[c] * v[j * k + c];
      out[i * n + j] = x;
    }
  }
  return out;
}

function relDiff(a: ArrayLike<number>, b: ArrayLike<number>): number {
  const d = new Float64Array(a.length);
  for (let i = 0; i < a.length; i++) d[i] = a[i] - b[i];
  return frob(d) / frob(b);
}

/** Max |Q^T Q - I| over the columns of the rows x k factor q with s > 0. */
function orthError(q: Float64Array, rows: number, k: number, s: Float64Array): number {
  let worst = 0;
  for (let p = 0; p < k; p++) {
    if (s[p] === 0) continue;
    for (let c = p; c < k; c++) {
      if (s[c] === 0) continue;
      let g = 0;
      for (let i = 0; i < rows; i++) g += q[i * k + p] * q[i * k + c];
      worst = Math.max(worst, Math.abs(g - (p === c ? 1 : 0)));
    }
  }
  return worst;
}

/** Structural checks every result must pass. */
function checkInvariants(d: Svd, m: number, n: number): void {
  expect(d.m).toBe(m);
  expect(d.n).toBe(n);
  expect(d.k).toBe(Math.min(m, n));
  expect(d.u.length).toBe(m * d.k);
  expect(d.v.length).toBe(n * d.k);
  expect(d.s.length).toBe(d.k);
  for (let j = 0; j < d.k; j++) {
    expect(Number.isFinite(d.s[j])).toBe(true);
    expect(d.s[j]).toBeGreaterThanOrEqual(0);
    if (j > 0) expect(d.s[j]).toBeLessThanOrEqual(d.s[j - 1]);
  }
  for (const x of d.u) expect(Number.isFinite(x)).toBe(true);
  for (const x of d.v) expect(Number.isFinite(x)).toBe(true);
  // Columns of a zero singular value are zero (documented contract).
  for (let j = 0; j < d.k; j++) {
    if (d.s[j] !== 0) continue;
    for (let i = 0; i < m; i++) expect(d.u[i * d.k + j]).toBe(0);
    for (let i = 0; i < n; i++) expect(d.v[i * d.k + j]).toBe(0);
  }
}

/** A smooth 64 x 64 field rounded to float32: full numerical rank, fast decay. */
function smoothF32(): Float64Array {
  const a = new Float64Array(64 * 64);
  for (let i = 0; i < 64; i++) {
    for (let j = 0; j < 64; j++) {
      a[i * 64 + j] = Math.fround(Math.sin(0.1 * i + (0.05 * j * j) / 64) + Math.exp(-((i - 30) ** 2 + (j - 20) ** 2) / 200));
    }
  }
  return a;
}

const SHAPES: [number, number][] = [
  [7, 5],
  [5, 7],
  [12, 12],
  [64, 64],
  [1, 9],
  [9, 1],
  [3, 40],
  [40, 3],
  [2, 2],
];

describe('svd', () => {
  it('matches the singular values of ml-matrix on random matrices', () => {
    // Reference: ml-matrix SingularValueDecomposition (reference library).
    SHAPES.forEach(([m, n], idx) => {
      const a = randomMatrix(m, n, 100 + idx);
      const d = svd(a, m, n);
      checkInvariants(d, m, n);
      const ref = refSingularValues(a, m, n);
      for (let j = 0; j < d.k; j++) {
        expect(Math.abs(d.s[j] - ref[j])).toBeLessThanOrEqual(1e-10 * ref[j]);
      }
    });
  });

  it('reconstructs a and has orthonormal singular vectors', () => {
    const cases: [Float64Array, number, number][] = SHAPES.map(([m, n], idx) => [randomMatrix(m, n, 200 + idx), m, n]);
    // Rank 3 product (10 x 3)(3 x 8): exercises zero / negligible singular values.
    const b = randomMatrix(10, 3, 7);
    const c = randomMatrix(3, 8, 8);
    const bc = new Float64Array(80);
    for (let i = 0; i < 10; i++) for (let j = 0; j < 8; j++) for (let t = 0; t < 3; t++) bc[i * 8 + j] += b[i * 3 + t] * c[t * 8 + j];
    cases.push([bc, 10, 8], [bc.slice(), 10, 8]);
    cases.push([smoothF32(), 64, 64]);
    for (const [a, m, n] of cases) {
      const copy = a.slice();
      const d = svd(a, m, n);
      expect(a).toEqual(copy); // input untouched
      checkInvariants(d, m, n);
      expect(relDiff(rankR(d, d.k), a)).toBeLessThan(1e-12);
      expect(orthError(d.u, m, d.k, d.s)).toBeLessThan(1e-12);
      expect(orthError(d.v, n, d.k, d.s)).toBeLessThan(1e-12);
    }
    // rank(BC) <= 3 (linear algebra fact): the 4th value is 0 or at rounding level.
    const d = svd(bc, 10, 8);
    expect(d.s[2]).toBeGreaterThan(1e-3 * d.s[0]);
    expect(d.s[3]).toBeLessThan(1e-14 * d.s[0]);
  });

  it('gives the truncation error of the Eckart-Young-Mirsky theorem', () => {
    // Eckart-Young-Mirsky theorem: min over rank-r B of ||a - B||_F is
    // sqrt(sum_{i >= r} s_i^2), attained by the truncated SVD.
    const shapes: [number, number][] = [
      [20, 13],
      [13, 20],
      [16, 16],
    ];
    shapes.forEach(([m, n], idx) => {
      const a = randomMatrix(m, n, 300 + idx);
      const d = svd(a, m, n);
      const norm = frob(a);
      const rnd = mulberry32(400 + idx);
      for (let r = 0; r <= d.k; r++) {
        let tail = 0;
        for (let j = r; j < d.k; j++) tail += d.s[j] * d.s[j];
        const ar = rankR(d, r);
        const diff = new Float64Array(m * n);
        for (let i = 0; i < diff.length; i++) diff[i] = a[i] - ar[i];
        const err = frob(diff);
        expect(Math.abs(err - Math.sqrt(tail))).toBeLessThanOrEqual(1e-12 * norm);
        if (r === 0 || r === d.k) continue;
        // Any other rank-r approximation (here: rank-r truncation with u
        // perturbed, refit by least squares via projection) is no better.
        const pu = new Float64Array(m * r);
        for (let i = 0; i < m; i++) for (let c = 0; c < r; c++) pu[i * r + c] = d.u[i * d.k + c] + 0.05 * (2 * rnd() - 1);
        const q = new SingularValueDecomposition(Matrix.from1DArray(m, r, Array.from(pu))).leftSingularVectors;
        const proj = q.mmul(q.transpose()).mmul(toMl(a, m, n));
        const other = frob(toMl(a, m, n).sub(proj).to1DArray());
        expect(other).toBeGreaterThan(err * (1 + 1e-9));
      }
    });
  });

  it('resolves small singular values down to rounding level', () => {
    // a = Q1 diag(sigma) Q2^T with sigma_j = 10^-j and orthogonal Q1, Q2 (from
    // ml-matrix, reference library). Weyl's theorem: each computed value must be
    // within about eps * ||a|| of sigma_j.
    const m = 20;
    const n = 14;
    const q1 = new SingularValueDecomposition(toMl(randomMatrix(m, n, 900), m, n)).leftSingularVectors;
    const q2 = new SingularValueDecomposition(toMl(randomMatrix(n, n, 901), n, n)).leftSingularVectors;
    const sigma = Array.from({ length: n }, (_, j) => 10 ** -j);
    const a = new Float64Array(q1.mmul(Matrix.diag(sigma)).mmul(q2.transpose()).to1DArray());
    const d = svd(a, m, n);
    checkInvariants(d, m, n);
    for (let j = 0; j < n; j++) expect(Math.abs(d.s[j] - sigma[j])).toBeLessThan(1e-14);
    expect(relDiff(rankR(d, d.k), a)).toBeLessThan(1e-14);
    expect(orthError(d.u, m, d.k, d.s)).toBeLessThan(1e-12);
    expect(orthError(d.v, n, d.k, d.s)).toBeLessThan(1e-12);
  });

  it('finds numerical rank 1 for a separable field', () => {
    // f(x) g(y) is the outer product f g^T: rank 1, s[0] = ||f|| ||g|| (linear algebra fact).
    const m = 48;
    const n = 64;
    const f = new Float64Array(m);
    const g = new Float64Array(n);
    for (let i = 0; i < m; i++) f[i] = Math.sin(0.13 * i + 0.2);
    for (let j = 0; j < n; j++) g[j] = Math.exp(-0.05 * j);
    const a = new Float64Array(m * n);
    for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) a[i * n + j] = f[i] * g[j];
    const d = svd(a, m, n);
    checkInvariants(d, m, n);
    expect(d.s[1] / d.s[0]).toBeLessThan(1e-12);
    const nf = frob(f);
    const ng = frob(g);
    expect(Math.abs(d.s[0] - nf * ng)).toBeLessThan(1e-13 * nf * ng);
    const sign = Math.sign(d.u[0] * f[0]);
    for (let i = 0; i < m; i++) expect(Math.abs(d.u[i * d.k] - (sign * f[i]) / nf)).toBeLessThan(1e-13);
    for (let j = 0; j < n; j++) expect(Math.abs(d.v[j * d.k] - (sign * g[j]) / ng)).toBeLessThan(1e-13);
  });

  it('gives the singular values of the 3 x 3 Hilbert matrix', () => {
    const h = new Float64Array(9);
    for (let i = 0; i < 3; i++) for (let j = 0; j < 3; j++) h[i * 3 + j] = 1 / (i + j + 1);
    const d = svd(h, 3, 3);
    checkInvariants(d, 3, 3);
    // Eigenvalues of H3 (= its singular values, H3 being SPD), from memory.
    const memory = [1.408318927, 0.1223270659, 0.002687340356];
    for (let j = 0; j < 3; j++) expect(Math.abs(d.s[j] - memory[j])).toBeLessThan(1e-9 * memory[j]);
    // Cross-check: ml-matrix (reference library).
    const ref = refSingularValues(h, 3, 3);
    for (let j = 0; j < 3; j++) expect(Math.abs(d.s[j] - ref[j])).toBeLessThan(1e-12 * ref[j]);
    // Sum of eigenvalues = trace = 23/15, product = det(H3) = 1/2160 (theorems; det from memory).
    expect(Math.abs(d.s[0] + d.s[1] + d.s[2] - 23 / 15)).toBeLessThan(1e-14);
    expect(Math.abs(d.s[0] * d.s[1] * d.s[2] * 2160 - 1)).toBeLessThan(1e-12);
  });

  it('returns zeros for the zero matrix', () => {
    for (const [m, n] of [
      [1, 1],
      [3, 5],
      [5, 3],
    ] as [number, number][]) {
      const d = svd(new Float64Array(m * n), m, n);
      checkInvariants(d, m, n);
      for (const x of d.s) expect(x).toBe(0);
      for (const x of d.u) expect(x).toBe(0);
      for (const x of d.v) expect(x).toBe(0);
    }
  });

  it('handles 1 x 1, 1 x n and m x 1', () => {
    const one = svd(Float64Array.of(-3), 1, 1);
    expect(one.s[0]).toBe(3);
    expect(Math.abs(one.u[0])).toBe(1);
    expect(Math.abs(one.v[0])).toBe(1);
    expect(one.u[0] * one.v[0]).toBe(-1);

    const row = Float64Array.of(3, 0, -4, 12);
    for (const [m, n] of [
      [1, 4],
      [4, 1],
    ] as [number, number][]) {
      const d = svd(row, m, n);
      checkInvariants(d, m, n);
      expect(Math.abs(d.s[0] - 13)).toBeLessThan(1e-14 * 13); // ||(3, 0, -4, 12)|| = 13
      const single = m === 1 ? d.u : d.v;
      const vec = m === 1 ? d.v : d.u;
      expect(Math.abs(single[0])).toBeCloseTo(1, 15);
      for (let i = 0; i < 4; i++) expect(Math.abs(vec[i] * single[0] - row[i] / 13)).toBeLessThan(1e-15);
    }
  });

  it('gives finite, scale-equivariant results near overflow and underflow', () => {
    const base = randomMatrix(16, 12, 500);
    const ref = svd(base, 16, 12);
    for (const scale of [1e300, 1e-300, 1e-310]) {
      const a = base.map((x) => x * scale);
      const d = svd(a, 16, 12);
      checkInvariants(d, 16, 12);
      // Scaled entries are rounded (subnormal at 1e-310), hence the looser bound there.
      const tol = scale < 1e-300 ? 1e-8 : 1e-13;
      for (let j = 0; j < d.k; j++) expect(Math.abs(d.s[j] / scale - ref.s[j])).toBeLessThan(tol * ref.s[0]);
      expect(orthError(d.u, 16, d.k, d.s)).toBeLessThan(1e-12);
      expect(orthError(d.v, 12, d.k, d.s)).toBeLessThan(1e-12);
    }
    // Squares of these entries overflow: s[0] = (MAX / 2) * sqrt(2).
    const max = Number.MAX_VALUE;
    const big = svd(Float64Array.of(max / 2, max / 2), 1, 2);
    expect(Math.abs(big.s[0] / (max / 2) - Math.SQRT2)).toBeLessThan(1e-15);
    const diag = svd(Float64Array.of(max, 0, 0, -max / 3), 2, 2);
    expect(diag.s[0]).toBe(max);
    expect(Math.abs(diag.s[1] / (max / 3) - 1)).toBeLessThan(1e-15);
    // Subnormal entries: power-of-two scaling keeps them exact.
    const sub = svd(Float64Array.of(5e-324), 1, 1);
    expect(sub.s[0]).toBe(5e-324);
    const sub2 = svd(Float64Array.of(0, 1e-320, 3e-320, 0), 2, 2);
    expect(Array.from(sub2.s)).toEqual([3e-320, 1e-320]);
    checkInvariants(sub2, 2, 2);
    // Mixed magnitudes.
    const mixed = svd(Float64Array.of(1e300, 1e-300), 1, 2);
    expect(mixed.s[0]).toBe(1e300);
  });

  it('is deterministic', () => {
    const a = smoothF32();
    const d1 = svd(a, 64, 64);
    const d2 = svd(a, 64, 64);
    expect(d2.s).toEqual(d1.s);
    expect(d2.u).toEqual(d1.u);
    expect(d2.v).toEqual(d1.v);
  });

  it('returns NaN for non-finite input and rejects bad shapes', () => {
    for (const bad of [NaN, Infinity, -Infinity]) {
      const d = svd(Float64Array.of(1, 2, bad, 4), 2, 2);
      for (const x of [...d.s, ...d.u, ...d.v]) expect(x).toBeNaN();
    }
    expect(() => svd(new Float64Array(5), 2, 3)).toThrow(InputError);
    expect(() => svd(new Float64Array(0), 0, 3)).toThrow(InputError);
    expect(() => svd(new Float64Array(3), 1.5, 2)).toThrow(InputError);
  });
});

/** Random SPD matrix a^T a + 0.5 I, r x r row-major. */
function randomSpd(r: number, seed: number): Float64Array {
  const a = randomMatrix(r + 3, r, seed);
  const g = new Float64Array(r * r);
  for (let i = 0; i < r; i++) {
    for (let j = 0; j < r; j++) {
      let x = i === j ? 0.5 : 0;
      for (let t = 0; t < r + 3; t++) x += a[t * r + i] * a[t * r + j];
      g[i * r + j] = x;
    }
  }
  return g;
}

function maxAbs(a: ArrayLike<number>): number {
  let m = 0;
  for (let i = 0; i < a.length; i++) m = Math.max(m, Math.abs(a[i]));
  return m;
}

function mulGB(g: Float64Array, r: number, x: Float64Array, nrhs: number): Float64Array {
  const out = new Float64Array(r * nrhs);
  for (let i = 0; i < r; i++) for (let c = 0; c < nrhs; c++) for (let t = 0; t < r; t++) out[i * nrhs + c] += g[i * r + t] * x[t * nrhs + c];
  return out;
}

describe('solveSpd', () => {
  it('matches ml-matrix solve on random SPD systems', () => {
    // Reference: ml-matrix solve (reference library).
    let seed = 600;
    for (const r of [1, 2, 5, 16]) {
      for (const nrhs of [1, 4]) {
        const g = randomSpd(r, seed++);
        const b = randomMatrix(r, nrhs, seed++);
        const ref = solve(toMl(g, r, r), toMl(b, r, nrhs)).to1DArray();
        const gCopy = g.slice();
        const x = b.slice();
        solveSpd(g, r, x, nrhs);
        expect(g).toEqual(gCopy); // g untouched
        const scale = maxAbs(ref);
        for (let i = 0; i < x.length; i++) expect(Math.abs(x[i] - ref[i])).toBeLessThan(1e-10 * scale);
      }
    }
  });

  it('solves many right-hand sides with one factor, as ml-matrix solve and as solveSpd', () => {
    // Reference: ml-matrix solve (reference library); solveSpd is the same factorization made for each b.
    let seed = 650;
    for (const r of [1, 3, 6]) {
      const g = randomSpd(r, seed++);
      const f = factorSpd(g, r);
      for (let k = 0; k < 4; k++) {
        const b = randomMatrix(r, 1, seed++);
        const ref = solve(toMl(g, r, r), toMl(b, r, 1)).to1DArray();
        const x = b.slice();
        solveFactored(f, x, 1);
        for (let i = 0; i < r; i++) expect(Math.abs(x[i] - ref[i])).toBeLessThan(1e-10 * maxAbs(ref));
        const once = b.slice();
        solveSpd(g, r, once, 1);
        expect(Array.from(x)).toEqual(Array.from(once));
      }
    }
    // A factor of a zero or non-finite g: x = 0 and x = NaN, as solveSpd gives.
    const zero = Float64Array.of(3, 4);
    solveFactored(factorSpd(new Float64Array(4), 2), zero, 1);
    expect(Array.from(zero)).toEqual([0, 0]);
    const nan = Float64Array.of(3, 4);
    solveFactored(factorSpd(Float64Array.of(1, NaN, NaN, 1), 2), nan, 1);
    for (const v of nan) expect(v).toBeNaN();
  });

  it('solves 1 x 1 and is scale-equivariant', () => {
    const x = Float64Array.of(2, 8);
    solveSpd(Float64Array.of(4), 1, x, 2);
    expect(Array.from(x)).toEqual([0.5, 2]);
    const g = randomSpd(6, 700);
    const b = randomMatrix(6, 3, 701);
    const x0 = b.slice();
    solveSpd(g, 6, x0, 3);
    for (const [sg, sb] of [
      [1e300, 1e300],
      [1e-300, 1e-300],
      [1e-300, 1],
    ]) {
      const xs = b.map((v) => v * sb);
      solveSpd(
        g.map((v) => v * sg),
        6,
        xs,
        3,
      );
      const f = sb / sg;
      for (let i = 0; i < xs.length; i++) expect(Math.abs(xs[i] / f - x0[i])).toBeLessThan(1e-12 * maxAbs(x0));
    }
    // x = b / g overflows for the first column only: Infinity, never NaN.
    const xo = Float64Array.of(1e300, 0);
    solveSpd(Float64Array.of(1e-320), 1, xo, 2);
    expect(Array.from(xo)).toEqual([Infinity, 0]);
  });

  it('stays finite on singular, zero and indefinite systems', () => {
    // Rank-2 PSD g = B B^T (5 x 5) with b in its range: residual must be small.
    const bm = randomMatrix(5, 2, 800);
    const g = new Float64Array(25);
    for (let i = 0; i < 5; i++) for (let j = 0; j < 5; j++) g[i * 5 + j] = bm[i * 2] * bm[j * 2] + bm[i * 2 + 1] * bm[j * 2 + 1];
    const y = randomMatrix(5, 2, 801);
    for (const scale of [1, 1e300, 1e-300]) {
      const gs = g.map((v) => v * scale);
      const b = mulGB(gs, 5, y, 2);
      const x = b.slice();
      solveSpd(gs, 5, x, 2);
      for (const v of x) expect(Number.isFinite(v)).toBe(true);
      const res = mulGB(gs, 5, x, 2);
      for (let i = 0; i < res.length; i++) expect(Math.abs(res[i] - b[i])).toBeLessThan(1e-8 * maxAbs(b));
    }

    // Zero rows/columns (as from zero singular vectors): those unknowns come out 0.
    const gd = Float64Array.of(2, 0, 0, 0, 0, 0, 0, 0, 3);
    const xd = Float64Array.of(1, 0, 6);
    solveSpd(gd, 3, xd, 1);
    expect(Math.abs(xd[0] - 0.5)).toBeLessThan(1e-10);
    expect(xd[1]).toBe(0);
    expect(Math.abs(xd[2] - 2)).toBeLessThan(1e-10);

    const xz = Float64Array.of(1, 2);
    solveSpd(new Float64Array(4), 2, xz, 1);
    expect(Array.from(xz)).toEqual([0, 0]);

    const xi = Float64Array.of(1, 2);
    solveSpd(Float64Array.of(0, 1, 1, 0), 2, xi, 1);
    for (const v of xi) expect(Number.isFinite(v)).toBe(true);
    const xn = Float64Array.of(1, 2);
    solveSpd(Float64Array.of(-1, 0, 0, -2), 2, xn, 1);
    for (const v of xn) expect(Number.isFinite(v)).toBe(true);
  });

  it('returns NaN for non-finite input and rejects bad shapes', () => {
    const x = Float64Array.of(1, 2);
    solveSpd(Float64Array.of(1, NaN, NaN, 1), 2, x, 1);
    for (const v of x) expect(v).toBeNaN();
    expect(() => solveSpd(new Float64Array(3), 2, new Float64Array(2), 1)).toThrow(InputError);
    expect(() => solveSpd(new Float64Array(4), 2, new Float64Array(3), 1)).toThrow(InputError);
  });
});

describe('singularValues', () => {
  it('gives bit for bit the values svd gives, and matches ml-matrix to rounding', () => {
    const rng = mulberry32(91);
    for (const [m, n, rank] of [
      [40, 30, 30],
      [30, 40, 5],
      [64, 64, 64],
      [7, 120, 3],
      [1, 9, 1],
    ]) {
      // A rank-`rank` matrix plus nothing, or full rank: a product of random factors.
      const a = new Float64Array(m * n);
      for (let k = 0; k < rank; k++) {
        const u = Array.from({ length: m }, () => rng() - 0.5);
        const v = Array.from({ length: n }, () => rng() - 0.5);
        for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) a[i * n + j] += u[i] * v[j] * 2 ** -k;
      }
      const got = singularValues(a, m, n);
      expect(Array.from(got)).toEqual(Array.from(svd(a, m, n).s));
      // Reference library: ml-matrix's SVD (Golub-Kahan-Reinsch, after JAMA).
      const ref = new SingularValueDecomposition(new Matrix(Array.from({ length: m }, (_, i) => Array.from(a.subarray(i * n, (i + 1) * n)))), { autoTranspose: true }).diagonal;
      for (let k = 0; k < Math.min(m, n); k++) expect(Math.abs(got[k] - ref[k])).toBeLessThanOrEqual(1e-12 * ref[0]);
    }
    expect(Array.from(singularValues(new Float64Array(6), 2, 3))).toEqual([0, 0]);
    expect(Array.from(singularValues(Float64Array.of(1, NaN, 0, 0), 2, 2)).every(Number.isNaN)).toBe(true);
  });
});
