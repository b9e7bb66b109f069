/**
 * Preparing a tile for encoding: classify its cells, fill the missing ones
 * (smoothly, then continuing its low-rank structure), centre it, and compute
 * its SVD on demand.
 */
import { ByteWriter } from '../format/bytes.js';
import { svd, type Svd } from '../linalg/svd.js';
import { truncatedSvd } from '../linalg/truncated.js';
import type { Dtype, FloatArray } from '../types.js';
import { fillMissing } from './fill.js';
import { Cell, classify, type Classes } from './mask.js';
import { encodeClasses } from './code-encode.js';

/** A tile made ready for encoding. */
export interface PreparedTile {
  m: number;
  n: number;
  dtype: Dtype;
  /** The original values in the field's dtype. */
  orig: FloatArray;
  /** Values as binary64, missing cells filled smoothly, then centred. */
  centred: Float64Array;
  center: number;
  classes: Classes;
  valid: number;
  /** Stored mask section bytes (empty when the tile has no missing cell). */
  maskSection: Uint8Array;
  /** False when centring overflowed (values near the float64 maximum). */
  finite: boolean;
  svd: Svd | null;
  /** How factor ranks are grouped in the payload (see groupSizes in tile-encode.ts). */
  grouping: 'one' | 'doubling';
  /**
   * When every valid value is an integer (below 2^40 in magnitude): their
   * greatest common step and one of them, so values are origin + k x quantum;
   * otherwise quantum is 0. See {@link integerLattice}.
   */
  lattice: { quantum: number; origin: number };
}

/** Classify, fill and centre a tile; the SVD is computed by {@link ensureSvd}. */
export function prepareTile(
  orig: FloatArray,
  m: number,
  n: number,
  dtype: Dtype,
  fill: Uint32Array | null,
  tol = 0,
  grouping: 'one' | 'doubling' = 'one',
): PreparedTile {
  const cells = m * n;
  const classes = classify(orig, fill);
  const valid = cells - classes.special;
  const x = new Float64Array(cells);
  let sum = 0;
  let first = NaN;
  let constant = true;
  for (let c = 0; c < cells; c++) {
    if (classes.codes[c] !== Cell.Valid) continue;
    const v = orig[c];
    x[c] = v;
    sum += v;
    if (first !== first) first = v;
    else if (v !== first) constant = false;
  }
  // A constant tile keeps its value exactly as centre; otherwise the mean.
  let center = valid === 0 ? 0 : constant ? first : sum / valid;
  if (!Number.isFinite(center)) center = 0;
  fillMissing(x, classes.codes, m, n, center);
  let finite = true;
  for (let c = 0; c < cells; c++) {
    x[c] -= center;
    if (!Number.isFinite(x[c])) finite = false;
  }
  if (finite && classes.special > 0 && valid > 0 && tol > 0) lowRankFill(x, classes.codes, m, n, tol);
  let maskSection: Uint8Array = new Uint8Array(0);
  if (classes.special > 0) {
    // u32 coded length, u32 raw NaN bytes, the coded class map, the raw NaN bits.
    const coded = encodeClasses(classes.codes, m, n);
    const w = new ByteWriter(coded.length + classes.rawNaN.length + 8);
    w.u32(coded.length);
    w.u32(classes.rawNaN.length);
    w.bytes(coded);
    w.bytes(classes.rawNaN);
    maskSection = w.finish();
  }
  const lattice = integerLattice(orig, classes.codes);
  return { m, n, dtype, orig, centred: x, center, classes, valid, maskSection, finite, svd: null, grouping, lattice };
}

/** Largest integer magnitude the lattice test accepts: far below 2^53, so differences and gcds are exact. */
const LATTICE_LIMIT = 2 ** 40;

/**
 * Many stored fields hold values on a lattice: integer counts, or heights
 * and depths recorded to whole units. A residual quantized with a step that
 * is an odd multiple of the lattice step keeps every value on the lattice,
 * so codes are fewer and errors are whole multiples of the lattice step.
 * Returns the greatest common divisor of the differences of the valid
 * values (Euclid's algorithm), or quantum 0 when a value is not an integer.
 */
export function integerLattice(orig: FloatArray, codes: Uint8Array): { quantum: number; origin: number } {
  let origin = NaN;
  let g = 0;
  for (let c = 0; c < orig.length; c++) {
    if (codes[c] !== Cell.Valid) continue;
    const v = orig[c];
    if (!Number.isInteger(v) || Math.abs(v) > LATTICE_LIMIT) return { quantum: 0, origin: 0 };
    if (origin !== origin) {
      origin = v;
      continue;
    }
    let a = Math.abs(v - origin);
    // gcd(g, a) by Euclid's algorithm.
    while (a > 0) {
      const r = g % a;
      g = a;
      a = r;
    }
  }
  return g > 0 ? { quantum: g, origin } : { quantum: 0, origin: 0 };
}

/**
 * Refine the stand-in values of missing cells so they continue the tile's
 * low-rank structure (hard impute: alternate a rank-r truncated SVD with
 * replacing the missing cells by its reconstruction; Troyanskaya et al., 2001).
 * The rank grows from 1 until the rank-r fit of the valid cells is within
 * the tolerance; if no rank up to IMPUTE_MAX_RANK gets there, the smooth fill stays.
 */
function lowRankFill(x: Float64Array, codes: Uint8Array, m: number, n: number, tol: number): void {
  const cells = m * n;
  const maxRank = Math.min(IMPUTE_MAX_RANK, Math.floor(Math.min(m, n) / 2));
  const trial = x.slice();
  const recon = new Float64Array(cells);
  for (let r = 1; r <= maxRank; r++) {
    let fit = Infinity;
    for (let iter = 0; iter < IMPUTE_ITERATIONS; iter++) {
      const s = r + 8 >= Math.min(m, n) ? svd(trial, m, n) : truncatedSvd(trial, m, n, r);
      const rr = Math.min(r, s.k);
      recon.fill(0);
      for (let i = 0; i < m; i++) {
        for (let k = 0; k < rr; k++) {
          const us = s.u[i * s.k + k] * s.s[k];
          if (us === 0) continue;
          for (let j = 0; j < n; j++) recon[i * n + j] += us * s.v[j * s.k + k];
        }
      }
      let sq = 0;
      let count = 0;
      for (let c = 0; c < cells; c++) {
        if (codes[c] === Cell.Valid) {
          const d = (trial[c] - recon[c]) / tol;
          sq += d * d;
          count++;
        } else trial[c] = recon[c];
      }
      fit = Math.sqrt(sq / count);
    }
    if (fit <= 0.5) {
      x.set(trial);
      return;
    }
  }
}

/** Hard-impute sweeps per trial rank, and the largest rank tried. */
const IMPUTE_ITERATIONS = 4;
const IMPUTE_MAX_RANK = 6;

/** The tile's SVD (computed once). */
export function ensureSvd(t: PreparedTile, need = Infinity): Svd {
  const full = Math.min(t.m, t.n);
  const want = Math.min(full, need);
  if (t.svd && t.svd.k >= want) return t.svd;
  // The randomized range finder pays off while the sketch (k + 8 columns) is well below full rank.
  t.svd = want + 8 >= full ? svd(t.centred, t.m, t.n) : truncatedSvd(t.centred, t.m, t.n, Math.max(want, PARTIAL_RANK));
  return t.svd;
}

/** Singular triplets computed first; more are computed when a search needs them. */
export const PARTIAL_RANK = 16;

