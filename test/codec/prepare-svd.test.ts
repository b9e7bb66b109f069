/**
 * The SVDs a prepared tile keeps (src/codec/prepare.ts ensureSvd): one per
 * rung of ranks, shared by every candidate, so that what a candidate of
 * rank r sees depends on the tile and r alone.
 *
 * References: ml-matrix's SingularValueDecomposition (reference library) for
 * the singular values; the Eckart-Young theorem (Eckart and Young,
 * Psychometrika 1, 1936; from memory) for the least error of a rank-r
 * approximation, the sum of the squares of the discarded singular values.
 */
import { Matrix, SingularValueDecomposition } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { ensureSvd, PARTIAL_RANK, prepareTile, svdRung } from '../../src/codec/prepare.js';
import { decodeTile } from '../../src/codec/tile-decode.js';
import { correct, encodeL2, lowRankPayload, pointwiseFactors } from '../../src/codec/tile-encode.js';
import { encodePointwise, pointwiseSearch } from '../../src/codec/pointwise-search.js';
import { payloadHead } from '../../src/codec/payload.js';

/** A block of vega-datasets 3.2.1 annual-precip.json (NOAA CFSv2 2016 annual precipitation, 360 x 168): rows 20.., columns 30.., no missing cells. */
function precipBlock(rows: number, cols: number): Float64Array {
  const path = fileURLToPath(new URL('../../node_modules/vega-datasets/data/annual-precip.json', import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; values: (number | null)[] };
  return Float64Array.from({ length: rows * cols }, (_, c) => g.values[(20 + Math.floor(c / cols)) * g.width + 30 + (c % cols)] ?? Number.NaN);
}

describe('svdRung', () => {
  it('doubles from PARTIAL_RANK and takes the whole SVD once rank + 8 reaches the shorter side', () => {
    expect(PARTIAL_RANK).toBe(16);
    // 128 x 100: rungs 16, 32, 64, then the whole (64 + 8 < 100, 128 + 8 >= 100).
    expect([1, 16, 17, 32, 33, 64, 65, 100, Infinity].map((r) => svdRung(128, 100, r))).toEqual([16, 16, 32, 32, 64, 64, 100, 100, 100]);
    // Small tiles: the whole SVD at once (16 + 8 >= 20).
    expect([1, 20].map((r) => svdRung(20, 64, r))).toEqual([20, 20]);
    expect(svdRung(64, 64, 16)).toBe(16);
    expect(svdRung(64, 64, 17)).toBe(32);
    expect(svdRung(64, 64, 33)).toBe(64);
  });
});

describe('ensureSvd', () => {
  const [m, n] = [128, 144];
  const values = precipBlock(m, n);
  const prepared = () => prepareTile(values, m, n, 'f64', null);

  it('gives a rank the same vectors whatever was computed before, and computes each rung once', () => {
    expect(values.every(Number.isFinite)).toBe(true);
    const a = prepared();
    const high = ensureSvd(a, 40);
    const lowAfter = ensureSvd(a, 5);
    const lowFresh = ensureSvd(prepared(), 5);
    expect(high.k).toBe(64);
    expect(lowAfter.k).toBe(16);
    expect(lowAfter.u).toEqual(lowFresh.u);
    expect(lowAfter.v).toEqual(lowFresh.v);
    expect(lowAfter.s).toEqual(lowFresh.s);
    // Kept: asked again, the same object.
    expect(ensureSvd(a, 12)).toBe(lowAfter);
    expect(ensureSvd(a, 60)).toBe(high);
    expect([...a.svds.keys()].sort((x, y) => x - y)).toEqual([16, 64]);
  });

  it('each rung: leading singular values as ml-matrix gives them, rank-r error at the Eckart-Young optimum', () => {
    const t = prepared();
    const ref = new SingularValueDecomposition(new Matrix(Array.from({ length: m }, (_, i) => Array.from(t.centred.subarray(i * n, i * n + n)))), { computeLeftSingularVectors: false, computeRightSingularVectors: false, autoTranspose: true }).diagonal;
    let frob2 = 0;
    for (const v of t.centred) frob2 += v * v;
    for (const r of [8, 16, 24, 48]) {
      const s = ensureSvd(t, r);
      // Leading values against ml-matrix (reference library): never above them (the singular values of Q^T A, with Q
      // orthonormal, are at most A's: interlacing, from memory), and the first four within 1e-6 (measured: 1e-7 at worst).
      for (let j = 0; j < r; j++) expect(s.s[j]).toBeLessThanOrEqual(ref[j] * (1 + 1e-12));
      for (let j = 0; j < 4; j++) expect(s.s[j]).toBeGreaterThanOrEqual(ref[j] * (1 - 1e-6));
      // Error of u_r diag(s_r) v_r^T: at least the Eckart-Young optimum (the discarded squares), and within 1% of it
      // (measured: 0.5% at rank 16 of rung 16, the rung's last vectors; this spectrum decays slowly).
      let err = 0;
      for (let i = 0; i < m; i++) {
        for (let j = 0; j < n; j++) {
          let x = t.centred[i * n + j];
          for (let k = 0; k < r; k++) x -= s.u[i * s.k + k] * s.s[k] * s.v[j * s.k + k];
          err += x * x;
        }
      }
      let optimum = 0;
      for (let j = r; j < ref.length; j++) optimum += ref[j] * ref[j];
      expect(err).toBeGreaterThanOrEqual(optimum * (1 - 1e-9) - 1e-12 * frob2);
      expect(err).toBeLessThanOrEqual(optimum * 1.01);
    }
  });

  it('a payload is the same on a fresh tile and on one that earlier candidates of other ranks went through', () => {
    const e = 2;
    const fresh = encodePointwise(prepared(), e);
    const used = prepared();
    encodeL2(used, 50, 0.5, 0.5);
    encodeL2(used, 3, 0.5, 0.5);
    expect(encodePointwise(used, e)).toEqual(fresh);
    const l2Fresh = encodeL2(prepared(), 20, 0.5, 0.5);
    encodePointwise(used, 0.5);
    expect(encodeL2(used, 20, 0.5, 0.5)).toEqual(l2Fresh);
  });
});

describe('the pointwise rank search (candidates ranked by estimated size, the best few coded)', () => {
  const [m, n] = [48, 48];
  // Blocks of annual-precip (see precipBlock) at a pointwise bound of rel 1e-3 and 1e-4 of the block's range.
  it.each([1e-3, 1e-4])('codes no more than 1% above the smallest payload of every candidate rank coded for real (rel %s)', (rel) => {
    const values = precipBlock(m, n);
    let [lo, hi] = [Infinity, -Infinity];
    for (const v of values) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
    const e = rel * (hi - lo);
    // Every candidate stated directly: rank 0 and ranks 1..16 (the search goes no further on this block), each
    // with its residual as correct() chooses it without the blend, coded by lowRankPayload.
    const t = prepareTile(values, m, n, 'f64', null);
    let least = lowRankPayload(t, null, correct(t, null, e, undefined, undefined, false)).length;
    for (let r = 1; r <= 16; r++) {
      const f = pointwiseFactors(t, r, e);
      if (f) least = Math.min(least, lowRankPayload(t, f, correct(t, f, e, undefined, undefined, false)).length);
    }
    const got = encodePointwise(prepareTile(values, m, n, 'f64', null), e);
    // The chosen payload may then take the blend (only if shorter) and the symbol coder (at most 1% longer).
    expect(got.length).toBeLessThanOrEqual(1.01 * least);
    // And it decodes within the bound.
    const back = decodeTile(got, { m, n, dtype: 'f64', fill: null, where: 'test', symbols: true });
    for (let c = 0; c < m * n; c++) expect(Math.abs(back[c] - values[c])).toBeLessThanOrEqual(e);
  });

  it.each([1e-3, 1e-2, 0.2])('in steps: what a trial weighs, the rank and bytes of its smallest candidate, then the same payload finished (rel %s)', (rel) => {
    const values = precipBlock(m, n);
    let [lo, hi] = [Infinity, -Infinity];
    for (const v of values) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
    const e = rel * (hi - lo);
    const search = pointwiseSearch(prepareTile(values, m, n, 'f64', null), e);
    const best = search.best();
    // A trial weighs the smallest candidate, or the first one coded: never fewer bytes.
    expect(search.trialBytes).toBeGreaterThanOrEqual(best.bytes);
    const payload = search.finish();
    expect(payload).toEqual(encodePointwise(prepareTile(values, m, n, 'f64', null), e));
    expect(search.finish()).toBe(payload);
    expect(search.best()).toBe(best);
    expect(payloadHead(payload).rank).toBe(best.rank);
    // Finishing takes the blend only if shorter, and the symbol coder at most 1% longer (and its length's varint a byte).
    expect(payload.length).toBeLessThanOrEqual(1.01 * best.bytes + 1);
  });

  it.each([1e-3, 1e-2])('estimates its plain rank-0 candidate within 2x of that candidate coded (rel %s)', (rel) => {
    const values = precipBlock(m, n);
    let [lo, hi] = [Infinity, -Infinity];
    for (const v of values) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
    const e = rel * (hi - lo);
    const search = pointwiseSearch(prepareTile(values, m, n, 'f64', null), e);
    // Rough bits and a sign bit per non-zero code (common practice, no source, for the 2x).
    const t = prepareTile(values, m, n, 'f64', null);
    const zero = lowRankPayload(t, null, correct(t, null, e, undefined, undefined, false)).length;
    expect(search.zeroEstimate).toBeGreaterThan(zero / 2);
    expect(search.zeroEstimate).toBeLessThan(2 * zero);
  });
});
