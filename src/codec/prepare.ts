/**
 * Preparing a tile for encoding: classify its cells, fill the missing ones
 * (smoothly, then continuing its low-rank structure), centre it, and compute
 * its SVD on demand.
 */
import { ByteWriter } from '../format/bytes.js';
import { solveSpd } from '../linalg/spd.js';
import { svd, type Svd } from '../linalg/svd.js';
import { truncatedSvd } from '../linalg/truncated.js';
import type { Dtype, FloatArray } from '../types.js';
import { fillMissing } from './fill.js';
import { Cell, classify, type Classes } from './mask.js';
import { encodeClasses } from './code-encode.js';
import { fieldStep } from './payload.js';
import { binary32Near } from './steps.js';

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
  /** The field's residual step (`fieldStep` of its tolerance; 0 for none): a payload names it by a flag. */
  fieldStep: number;
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
  // The mean is rounded to binary32, which a payload stores in 4 bytes (any centre decodes the same way).
  let center = valid === 0 ? 0 : constant ? first : binary32Near(sum / valid);
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
    // Varints of the coded length and of the raw NaN bytes, the coded class map, the raw NaN bits.
    const coded = encodeClasses(classes.codes, m, n);
    const w = new ByteWriter(coded.length + classes.rawNaN.length + 10);
    w.varint(coded.length);
    w.varint(classes.rawNaN.length);
    w.bytes(coded);
    w.bytes(classes.rawNaN);
    maskSection = w.finish();
  }
  const lattice = integerLattice(orig, classes.codes);
  return { m, n, dtype, orig, centred: x, center, classes, valid, maskSection, finite, svd: null, grouping, lattice, fieldStep: fieldStep(tol) };
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
 * low-rank structure. For r = 1, 2, ... a rank-r factorization U V^T is fitted
 * to the valid cells alone by alternating least squares (each row of U, then
 * each row of V, solved from the cells it sees; the matrix-completion method
 * of Hastie, Mazumder, Lee and Zadeh, 2015, here without its ridge), started
 * from the truncated SVD of the smooth fill. The first rank whose fit of the
 * valid cells is within the tolerance (RMS misfit at most half of it) fills
 * the missing cells with U V^T; if none up to IMPUTE_MAX_RANK is, the smooth
 * fill stays. A row or column that sees no more cells than the rank is fitted
 * to the smooth fill along it instead (a column of land in a time x space
 * matrix becomes the projection of its smooth fill on the fitted factors).
 */
function lowRankFill(x: Float64Array, codes: Uint8Array, m: number, n: number, tol: number): void {
  const maxRank = Math.min(IMPUTE_MAX_RANK, Math.floor(Math.min(m, n) / 2));
  const rowSeen = new Int32Array(m);
  const colSeen = new Int32Array(n);
  let valid = 0;
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      if (codes[i * n + j] !== Cell.Valid) continue;
      rowSeen[i]++;
      colSeen[j]++;
      valid++;
    }
  }
  let budget = ALS_BUDGET;
  for (let r = 1; r <= maxRank && budget > 0; r++) {
    const s = r + 8 >= Math.min(m, n) ? svd(x, m, n) : truncatedSvd(x, m, n, r);
    const rr = Math.min(r, s.k);
    const u = new Float64Array(m * rr);
    const v = new Float64Array(n * rr);
    for (let i = 0; i < m; i++) for (let k = 0; k < rr; k++) u[i * rr + k] = s.u[i * s.k + k] * s.s[k];
    for (let j = 0; j < n; j++) for (let k = 0; k < rr; k++) v[j * rr + k] = s.v[j * s.k + k];
    let fit = misfit(x, codes, u, v, m, n, rr, tol, valid);
    for (let iter = 0; iter < ALS_ITERATIONS && fit > ALS_DONE && budget > 0; iter++, budget--) {
      alsHalf(x, codes, v, u, m, n, rr, rowSeen, false);
      alsHalf(x, codes, u, v, m, n, rr, colSeen, true);
      const next = misfit(x, codes, u, v, m, n, rr, tol, valid);
      const ratio = next / fit;
      fit = next;
      if (fit <= 0.5) {
        // Within the tolerance: go on while the fill still moves (the hole converges with the fit).
        if (ratio > 0.99) break;
      } else if (!(ratio < 1) || (iter >= 10 && fit > 100) || (iter >= 60 && Math.log(0.5 / fit) / Math.log(ratio) > ALS_ITERATIONS - iter)) {
        // No progress; still far off after 10 sweeps; or, past the early plateaus, too slow to get there.
        break;
      }
    }
    if (fit <= 0.5) {
      for (let i = 0; i < m; i++) {
        for (let j = 0; j < n; j++) {
          const c = i * n + j;
          if (codes[c] === Cell.Valid) continue;
          let sum = 0;
          for (let k = 0; k < rr; k++) sum += u[i * rr + k] * v[j * rr + k];
          x[c] = sum;
        }
      }
      return;
    }
  }
}

/**
 * One half-step of alternating least squares: each row of `out` (rows of x
 * when `byCol` is false, columns when true) is solved from the valid cells
 * of its line against the fixed factor `fixed`. A line that sees at most r
 * valid cells is solved from all its cells, the smooth fill included, so
 * that it stays close to that fill (a column of land stays smooth).
 */
function alsHalf(x: Float64Array, codes: Uint8Array, fixed: Float64Array, out: Float64Array, m: number, n: number, r: number, seen: Int32Array, byCol: boolean): void {
  const lines = byCol ? n : m;
  const len = byCol ? m : n;
  const g = new Float64Array(r * r);
  const b = new Float64Array(r);
  for (let a = 0; a < lines; a++) {
    const all = seen[a] <= r;
    g.fill(0);
    b.fill(0);
    for (let e = 0; e < len; e++) {
      const c = byCol ? e * n + a : a * n + e;
      if (!all && codes[c] !== Cell.Valid) continue;
      const f = e * r;
      const xc = x[c];
      for (let k = 0; k < r; k++) {
        const fk = fixed[f + k];
        b[k] += xc * fk;
        for (let l = 0; l <= k; l++) g[k * r + l] += fk * fixed[f + l];
      }
    }
    for (let k = 0; k < r; k++) for (let l = 0; l < k; l++) g[l * r + k] = g[k * r + l];
    solveSpd(g, r, b, 1);
    if (!b.every(Number.isFinite)) continue;
    out.set(b, a * r);
  }
}

/** RMS of (x - U V^T) / tol over the valid cells. */
function misfit(x: Float64Array, codes: Uint8Array, u: Float64Array, v: Float64Array, m: number, n: number, r: number, tol: number, valid: number): number {
  let sq = 0;
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      if (codes[c] !== Cell.Valid) continue;
      let sum = 0;
      for (let k = 0; k < r; k++) sum += u[i * r + k] * v[j * r + k];
      const d = (x[c] - sum) / tol;
      sq += d * d;
    }
  }
  return Math.sqrt(sq / Math.max(1, valid));
}

/**
 * Alternating least squares sweeps: at most per trial rank, and over all
 * ranks of a tile (which bounds the work of a tile whose valid cells no low
 * rank fits); and the RMS misfit, in tolerances, below which a fit counts
 * as converged. Then the largest rank tried.
 */
const ALS_ITERATIONS = 150;
const ALS_BUDGET = 240;
const ALS_DONE = 0.01;
const IMPUTE_MAX_RANK = 6;

/** The tile's SVD (computed once). */
export function ensureSvd(t: PreparedTile, need = Infinity): Svd {
  const full = Math.min(t.m, t.n);
  const want = Math.min(full, need);
  if (t.svd && t.svd.k >= want) return t.svd;
  // At least PARTIAL_RANK triplets (so a search can grow), never more than the tile has; the randomized
  // range finder pays off while its sketch (k + 8 columns) is well below full rank.
  const k = Math.min(full, Math.max(want, PARTIAL_RANK));
  t.svd = k + 8 >= full ? svd(t.centred, t.m, t.n) : truncatedSvd(t.centred, t.m, t.n, k);
  return t.svd;
}

/** Singular triplets computed first; more are computed when a search needs them. */
export const PARTIAL_RANK = 16;

