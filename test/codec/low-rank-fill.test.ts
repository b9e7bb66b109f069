/**
 * The encoder's low-rank fill of missing cells (src/codec/low-rank-fill.ts):
 * on a matrix of low rank with holes it recovers the hidden entries; on a
 * tile no low rank fits it leaves the smooth fill alone; valid cells never
 * change.
 */
import { describe, expect, it } from 'vitest';
import { fillMissing } from '../../src/codec/fill.js';
import { lowRankFill } from '../../src/codec/low-rank-fill.js';
import { Cell } from '../../src/codec/mask.js';

const M = 40;
const N = 60;

/** Codes of an M x N tile with a 9 x 14 block hole (an island) and every 7th cell of the rest missing. */
function holes(): Uint8Array {
  const codes = new Uint8Array(M * N);
  for (let i = 0; i < M; i++) {
    for (let j = 0; j < N; j++) {
      const island = i >= 12 && i < 21 && j >= 30 && j < 44;
      if (island || (i * N + j) % 7 === 3) codes[i * N + j] = Cell.Fill;
    }
  }
  return codes;
}

/** The tile as the encoder hands it over: missing cells smoothly filled. */
function smoothed(truth: Float64Array, codes: Uint8Array): Float64Array {
  const x = Float64Array.from(truth, (v, c) => (codes[c] === Cell.Valid ? v : 0));
  fillMissing(x, codes, M, N, 0);
  return x;
}

/** Sum of `rank` outer products of sampled cosines (rank exactly `rank` for these frequencies). */
function lowRank(rank: number): Float64Array {
  const a = new Float64Array(M * N);
  for (let k = 0; k < rank; k++) {
    for (let i = 0; i < M; i++) {
      for (let j = 0; j < N; j++) a[i * N + j] += (3 - k) * Math.cos(0.11 * (k + 1) * i + k) * Math.cos(0.07 * (k + 1) * j + 0.5 * k);
    }
  }
  return a;
}

describe('lowRankFill', () => {
  it.each([1, 2, 3])('recovers the hidden entries of a rank-%i matrix', (rank) => {
    // A matrix of rank r is determined by a large enough set of its entries that meets every row and
    // column often enough (exact matrix completion: Candes and Recht, "Exact matrix completion via convex
    // optimization", 2009; from memory); here 78% of the entries are seen, every row and column at least
    // 40 times, far more than r (common practice, no source, for the margin).
    const truth = lowRank(rank);
    const codes = holes();
    const x = smoothed(truth, codes);
    const before = x.slice();
    let smoothErr = 0;
    for (let c = 0; c < M * N; c++) if (codes[c] !== Cell.Valid) smoothErr = Math.max(smoothErr, Math.abs(x[c] - truth[c]));
    lowRankFill(x, codes, M, N, 1e-6);
    let err = 0;
    for (let c = 0; c < M * N; c++) {
      if (codes[c] === Cell.Valid) expect(x[c]).toBe(before[c]);
      else err = Math.max(err, Math.abs(x[c] - truth[c]));
    }
    expect(smoothErr).toBeGreaterThan(0.05);
    expect(err).toBeLessThan(1e-5);
  });

  it('leaves the smooth fill alone where no low rank fits the valid cells', () => {
    // Independent uniform noise has full rank: its best rank-6 approximation leaves most of its energy
    // (Eckart-Young: the tail of 34 of 40 comparable singular values; from memory).
    let s = 12345;
    const noise = Float64Array.from({ length: M * N }, () => {
      s = (Math.imul(s, 1103515245) + 12345) >>> 0;
      return s / 2 ** 32 - 0.5;
    });
    const codes = holes();
    const x = smoothed(noise, codes);
    const before = x.slice();
    lowRankFill(x, codes, M, N, 1e-3);
    expect(x).toEqual(before);
  });

  it.each([
    [0.45, true],
    [1, false],
  ])('on a stack with whole columns missing and noise of %f tolerances, fills them: %s', (noiseRms, fills) => {
    // Rows are snapshots and columns places; columns 20 to 29 are land in every snapshot, so the valid
    // cells are a block of whole columns, and the best rank-6 fit of them leaves the block's energy past its
    // 6th singular value (Eckart-Young; Golub and Van Loan, Matrix Computations, theorem 2.4.8; from
    // memory): about (1 - 6/40 - 6/50) of the noise's, an RMS misfit near 0.85 times its RMS. Against the
    // target of half a tolerance: 0.38 fills the land, 0.85 leaves the smooth fill (common practice, no
    // source, for the noise's share).
    const tol = 1e-3;
    let seed = 777;
    const truth = lowRank(6);
    for (let c = 0; c < M * N; c++) {
      seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
      // Uniform noise of RMS noiseRms x tol (a uniform on [-h, h] has RMS h / sqrt(3)).
      truth[c] += (seed / 2 ** 32 - 0.5) * 2 * Math.sqrt(3) * noiseRms * tol;
    }
    const codes = new Uint8Array(M * N);
    for (let i = 0; i < M; i++) for (let j = 20; j < 30; j++) codes[i * N + j] = Cell.Fill;
    const x = smoothed(truth, codes);
    const before = x.slice();
    lowRankFill(x, codes, M, N, tol);
    let changed = false;
    for (let c = 0; c < M * N; c++) {
      if (codes[c] === Cell.Valid) expect(x[c]).toBe(before[c]);
      else if (x[c] !== before[c]) changed = true;
    }
    expect(changed).toBe(fills);
  });
});
