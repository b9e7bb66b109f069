/**
 * Preparing a tile for encoding: classify its cells, fill the missing ones
 * (smoothly, then continuing its low-rank structure), centre it, and compute
 * its SVD on demand.
 */
import { ByteWriter } from '../format/bytes.js';
import { svd, type Svd } from '../linalg/svd.js';
import { OVERSAMPLE, truncatedSvd } from '../linalg/truncated.js';
import type { Dtype, FloatArray } from '../types.js';
import { fillMissing } from './fill.js';
import { lowRankFill } from './low-rank-fill.js';
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
  /**
   * The tile's SVDs computed so far, by rung (see {@link svdRung}): a cache,
   * so every candidate of every search on this tile shares them.
   */
  svds: Map<number, Svd>;
  /**
   * Payloads the L2 plans' costing made of this tile, by plan and rank (see
   * planKey in plan-l2.ts), so that the second pass takes the chosen plan's
   * as they are instead of encoding the tile again.
   */
  costed: Map<string, Uint8Array>;
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
  /**
   * The field layer's term for each cell (see layer.ts), or null: the tile's own
   * low-rank part, centre and residual code `orig - layer`, and every
   * reconstruction here adds the term as the decoder does.
   */
  layer: Float64Array | null;
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
  layer: Float64Array | null = null,
): PreparedTile {
  const cells = m * n;
  const classes = classify(orig, fill);
  const valid = cells - classes.special;
  const x = new Float64Array(cells);
  let sum = 0;
  let first = NaN;
  let constant = true;
  if (classes.special === 0 && layer === null && cells > 0) {
    // Every cell valid, no layer: the same sum in the same order, with no test but the constant one.
    first = orig[0];
    for (let c = 0; c < cells; c++) {
      const v = orig[c];
      x[c] = v;
      sum += v;
      if (v !== first) constant = false;
    }
  } else {
    for (let c = 0; c < cells; c++) {
      if (classes.codes[c] !== Cell.Valid) continue;
      // Under a field layer the tile models what the layer leaves (binary64; the check is against orig).
      const v = layer ? orig[c] - layer[c] : orig[c];
      x[c] = v;
      sum += v;
      if (first !== first) first = v;
      else if (v !== first) constant = false;
    }
  }
  // A constant tile keeps its value exactly as centre; otherwise the mean.
  // The mean is rounded to binary32, which a payload stores in 4 bytes (any centre decodes the same way).
  let center = valid === 0 ? 0 : constant ? first : binary32Near(sum / valid);
  if (!Number.isFinite(center)) center = 0;
  // Nothing to fill in a tile with every cell valid (fillMissing would find so in a pass over its codes).
  if (classes.special > 0) fillMissing(x, classes.codes, m, n, center);
  // x - x is 0 for every finite x, NaN otherwise: one sum tells whether centring overflowed anywhere.
  let overflow = 0;
  for (let c = 0; c < cells; c++) {
    const d = x[c] - center;
    x[c] = d;
    overflow += d - d;
  }
  const finite = overflow === 0;
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
  // The layer's term is no lattice point: lattice candidates would only miss.
  const lattice = layer ? { quantum: 0, origin: 0 } : integerLattice(orig, classes.codes);
  return { m, n, dtype, orig, centred: x, center, classes, valid, maskSection, finite, svds: new Map(), costed: new Map(), grouping, lattice, fieldStep: fieldStep(tol), layer };
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
    // gcd(g, a) by Euclid's algorithm; gcd(1, a) is 1 (the values still have to be checked to be integers): a
    // float remainder costs tens of nanoseconds, and most integer fields reach 1 within a few cells.
    if (g === 1) continue;
    let a = Math.abs(v - origin);
    while (a > 0) {
      const r = g % a;
      g = a;
      a = r;
    }
  }
  return g > 0 ? { quantum: g, origin } : { quantum: 0, origin: 0 };
}

/**
 * The SVD whose leading `need` triplets the encoder uses for a rank-`need`
 * candidate: the rung {@link svdRung} of `need`, computed once per tile and
 * kept on it. What a candidate of rank r sees is so a function of the tile
 * and r alone, whatever was asked before: every L2 plan's costing, the
 * pointwise rank search and the final encode share the same vectors (a
 * randomized SVD's leading vectors depend a little on how many it computes).
 */
export function ensureSvd(t: PreparedTile, need = Infinity): Svd {
  const k = svdRung(t.m, t.n, need);
  let s = t.svds.get(k);
  if (s === undefined) {
    s = k === Math.min(t.m, t.n) ? svd(t.centred, t.m, t.n) : truncatedSvd(t.centred, t.m, t.n, k);
    t.svds.set(k, s);
  }
  return s;
}

/**
 * Keep an SVD computed elsewhere of the tile's own centred values with
 * {@link truncatedSvd} at rank k, when k is a rung: it is then what
 * {@link ensureSvd} would compute (the same call on the same values).
 */
export function keepSvd(t: PreparedTile, k: number, s: Svd): void {
  if (svdRung(t.m, t.n, k) === k && k < Math.min(t.m, t.n) && !t.svds.has(k)) t.svds.set(k, s);
}

/**
 * The rank of the SVD computed for a candidate of rank `need` in an m x n
 * tile: PARTIAL_RANK, doubled until it covers `need`; the whole SVD once
 * that rank and the range finder's oversampling (8) reach the tile's
 * shorter side, where the randomized range finder no longer pays off. A
 * search growing its rank so computes a few SVDs (16, 32, 64, ...), not
 * one per candidate rank.
 */
export function svdRung(m: number, n: number, need: number): number {
  const full = Math.min(m, n);
  let k = PARTIAL_RANK;
  while (k < need && k + OVERSAMPLE < full) k *= 2;
  return k + OVERSAMPLE >= full ? full : k;
}

/** Rank of the first SVD computed for a tile. */
export const PARTIAL_RANK = 16;
