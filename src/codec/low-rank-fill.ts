/**
 * Low-rank stand-in values for the missing cells of a tile: after the smooth
 * fill (fill.ts), the missing cells are refitted so that they continue the
 * tile's low-rank structure, which keeps a land mask from adding rank.
 */
import { factorSpd, solveFactored } from '../linalg/spd.js';
import { gramSingularValues } from '../linalg/spectrum.js';
import { svd, type Svd } from '../linalg/svd.js';
import { truncatedSvd } from '../linalg/truncated.js';
import { Cell } from './mask.js';

/**
 * Refine the stand-in values of missing cells so they continue the tile's
 * low-rank structure. For r = 1, 2, ... a rank-r factorization U V^T is fitted
 * to the valid cells alone by alternating least squares (each row of U, then
 * each row of V, solved from the cells it sees; the matrix-completion method
 * of Hastie, Mazumder, Lee and Zadeh, 2015, here without its ridge), started
 * from the leading r triplets of the smooth fill's SVD (one truncated SVD, of
 * the largest rank tried, serves every r). The first rank whose fit of the
 * valid cells is within the tolerance (RMS misfit at most half of it) fills
 * the missing cells with U V^T; if none up to IMPUTE_MAX_RANK is, the smooth
 * fill stays. A rank is given up as soon as its misfit, shrinking at the
 * pace of its last two sweeps, would not reach the target within
 * ALS_PATIENCE more sweeps (on the demo field nearly every rank of a large
 * candidate tile plateaus far from it within a few sweeps). A row or
 * column that sees no more cells than the rank is fitted to the smooth fill
 * along it instead (a column of land in a time x space matrix becomes the
 * projection of its smooth fill on the fitted factors).
 *
 * `x` is the m x n tile, row-major, centred, missing cells smoothly filled;
 * only its missing cells change.
 */
export function lowRankFill(x: Float64Array, codes: Uint8Array, m: number, n: number, tol: number): void {
  const maxRank = Math.min(IMPUTE_MAX_RANK, Math.floor(Math.min(m, n) / 2));
  if (maxRank < 1) return;
  const rows = side(x, codes, m, n, false);
  const cols = side(x, codes, m, n, true);
  let valid = 0;
  for (let i = 0; i < m; i++) valid += rows.seen[i];
  const norm = 1 / (tol * tol * Math.max(1, valid));
  let budget = ALS_BUDGET;
  // Every rank starts from the leading triplets of the smooth fill: one SVD serves them all.
  const s = maxRank + 8 >= Math.min(m, n) ? svd(x, m, n) : truncatedSvd(x, m, n, maxRank);
  // Where no rank up to maxRank can fit the valid cells within the tolerance, the smooth fill stays.
  if (beyondReach(x, m, n, rows, cols, s, maxRank, norm)) return;
  for (let r = 1; r <= maxRank && budget > 0; r++) {
    const rr = Math.min(r, s.k);
    const u = new Float64Array(m * rr);
    const v = new Float64Array(n * rr);
    for (let i = 0; i < m; i++) for (let k = 0; k < rr; k++) u[i * rr + k] = s.u[i * s.k + k] * s.s[k];
    for (let j = 0; j < n; j++) for (let k = 0; k < rr; k++) v[j * rr + k] = s.v[j * s.k + k];
    let fit = Math.sqrt(misfit(cols, u, v, rr) * norm);
    let before = fit;
    for (let iter = 0; iter < ALS_ITERATIONS && fit > ALS_DONE && budget > 0; iter++, budget--) {
      alsHalf(rows, v, u, rr, false);
      const next = Math.sqrt(alsHalf(cols, u, v, rr, true) * norm);
      const ratio = next / fit;
      // Pace over the last two sweeps, which rides out a one-sweep stall.
      const pace = Math.sqrt(next / before);
      before = fit;
      fit = next;
      if (fit <= FIT_TARGET) {
        // Within the tolerance: go on while the fill still moves (the hole converges with the fit).
        if (ratio > 0.99) break;
      } else if (!(ratio < 1) || (iter >= 1 && Math.log(FIT_TARGET / fit) / Math.log(pace) > ALS_PATIENCE)) {
        // No progress, or too slow to get there.
        break;
      }
    }
    if (fit <= FIT_TARGET) {
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
 * Whether no rank-r fit with r <= maxRank can come within the target on
 * the tile's valid cells (an RMS misfit of FIT_TARGET tolerances, in the
 * terms of {@link lowRankFill}: a squared misfit sq with sq x norm <=
 * FIT_TARGET^2), proved by a block of valid cells: every cell of the lines
 * (columns across every row, or rows across every column) that miss none,
 * or evenly spaced ones of them (at most BLOCK_CELLS cells). The misfit of
 * any rank-r matrix over the valid cells is at least its misfit over the
 * block, at least the block's own tail energy beyond rank r (Eckart-Young:
 * the sum of its squared singular values past the r-th; Golub and Van
 * Loan, Matrix Computations, 4th ed., theorem 2.4.8), which is no less
 * than the tail beyond maxRank. The block's singular values come from its
 * Gram matrix, each within about K eps ||block||^2 of the true one for K
 * values (src/linalg/spectrum.ts): the tail is taken less a margin of
 * BLOCK_MARGIN K (len + K) eps times the block's energy, so that rounding
 * cannot make the proof. Then the alternating fits would all stop short
 * of the target and leave the smooth fill, as returning now does.
 *
 * Made only where it may succeed: where the smooth fill's own energy
 * beyond the leading maxRank triplets (`s`; an upper bound on any block's
 * tail, the block being a part of the tile) passes the target.
 */
function beyondReach(x: Float64Array, m: number, n: number, rows: Side, cols: Side, s: Svd, maxRank: number, norm: number): boolean {
  let lead = 0;
  let energy = 0;
  for (let k = 0; k < s.k; k++) {
    const e = s.s[k] * s.s[k];
    if (k < maxRank) lead += e;
    energy += e;
  }
  const frob2 = 'frob2' in s && typeof s.frob2 === 'number' ? s.frob2 : energy;
  if (!((frob2 - lead) * norm > FIT_TARGET * FIT_TARGET)) return false;
  // The lines that miss no cell: columns (each m long) or rows (each n long), whichever hold more cells.
  const fullCols: number[] = [];
  for (let j = 0; j < n; j++) if (cols.seen[j] === m) fullCols.push(j);
  const fullRows: number[] = [];
  for (let i = 0; i < m; i++) if (rows.seen[i] === n) fullRows.push(i);
  const byCol = fullCols.length * m >= fullRows.length * n;
  const lines = byCol ? fullCols : fullRows;
  const len = byCol ? m : n;
  const count = Math.min(lines.length, Math.floor(BLOCK_CELLS / len));
  if (count <= maxRank || len <= maxRank) return false;
  // The block, count x len row-major: line k is lines[floor(k * lines.length / count)].
  const block = new Float64Array(count * len);
  for (let k = 0; k < count; k++) {
    const a = lines[Math.floor((k * lines.length) / count)];
    const o = k * len;
    if (byCol) for (let i = 0; i < m; i++) block[o + i] = x[i * n + a];
    else block.set(x.subarray(a * n, a * n + n), o);
  }
  const sv = gramSingularValues(block, count, len);
  const K = sv.length;
  let tail = 0;
  let total = 0;
  for (let k = 0; k < K; k++) {
    const e = sv[k] * sv[k];
    if (k >= maxRank) tail += e;
    total += e;
  }
  const margin = BLOCK_MARGIN * K * (Math.max(count, len) + K) * Number.EPSILON * total;
  return (tail - margin) * norm > FIT_TARGET * FIT_TARGET * (1 + 1e-6);
}

/**
 * The tile seen along one direction: its rows (the tile itself), or its
 * columns (a transposed copy), so that a line's cells are contiguous.
 */
interface Side {
  lines: number;
  len: number;
  /** All values, line after line (missing cells hold the smooth fill). */
  full: Float64Array;
  /** Cell classes, line after line. */
  codes: Uint8Array;
  /** Valid cells per line. */
  seen: Int32Array;
  /** Positions of missing cells along each line: line a's are missIdx[missPtr[a] .. missPtr[a + 1]). */
  missPtr: Int32Array;
  missIdx: Int32Array;
}

/** Build the {@link Side} of the rows of an m x n tile, or (transposing it) of its columns. */
function side(x: Float64Array, codes: Uint8Array, m: number, n: number, byCol: boolean): Side {
  const lines = byCol ? n : m;
  const len = byCol ? m : n;
  let full = x;
  let lineCodes = codes;
  if (byCol) {
    full = new Float64Array(m * n);
    lineCodes = new Uint8Array(m * n);
    // Transposed a block of TRANSPOSE_BLOCK x TRANSPOSE_BLOCK cells at a time, so that the writes of a block stay in the cache.
    for (let i0 = 0; i0 < m; i0 += TRANSPOSE_BLOCK) {
      const i1 = Math.min(m, i0 + TRANSPOSE_BLOCK);
      for (let j0 = 0; j0 < n; j0 += TRANSPOSE_BLOCK) {
        const j1 = Math.min(n, j0 + TRANSPOSE_BLOCK);
        for (let i = i0; i < i1; i++) {
          for (let j = j0; j < j1; j++) {
            full[j * m + i] = x[i * n + j];
            lineCodes[j * m + i] = codes[i * n + j];
          }
        }
      }
    }
  }
  const seen = new Int32Array(lines);
  const missPtr = new Int32Array(lines + 1);
  for (let a = 0; a < lines; a++) {
    for (let e = 0; e < len; e++) if (lineCodes[a * len + e] === Cell.Valid) seen[a]++;
    missPtr[a + 1] = missPtr[a] + len - seen[a];
  }
  const missIdx = new Int32Array(missPtr[lines]);
  for (let a = 0, p = 0; a < lines; a++) for (let e = 0; e < len; e++) if (lineCodes[a * len + e] !== Cell.Valid) missIdx[p++] = e;
  return { lines, len, full, codes: lineCodes, seen, missPtr, missIdx };
}

/**
 * One half-step of alternating least squares: each row of `out` (one per
 * line of `s`) is solved from the valid cells of its line against the fixed
 * factor `fixed` (one row per position along the line). A line that sees at
 * most r valid cells is solved from all its cells, the smooth fill included,
 * so that it stays close to that fill (a column of land stays smooth).
 *
 * The normal matrix of a line is the Gram matrix of all of `fixed`, computed
 * once, less the rows at its missing cells (or, for a line missing most of
 * its cells, summed over its valid cells). Each normal matrix is factored
 * once (solveSpd's factorization, the same bits): the Gram matrix's for
 * every line it serves, and a line's own for the lines after it with the
 * same missing cells (in a time x space stack whose mask does not change in
 * time, every snapshot's). With `resid`, returns the sum of squared
 * residuals over the valid cells after the update (else 0).
 */
function alsHalf(s: Side, fixed: Float64Array, out: Float64Array, r: number, resid: boolean): number {
  const { lines, len, full, codes, seen, missPtr, missIdx } = s;
  const gram = new Float64Array(r * r);
  for (let e = 0; e < len; e++) addOuter(gram, fixed, e * r, r, 1);
  symmetrize(gram, r);
  const whole = factorSpd(gram, r);
  const lanes = wide(fixed, len, r);
  const g = new Float64Array(r * r);
  const own = factorSpd(g, r);
  // The line whose missing cells `own` was factored for (none yet).
  let ownOf = -1;
  const b = new Float64Array(r);
  let sq = 0;
  for (let a = 0; a < lines; a++) {
    const all = seen[a] <= r;
    const base = a * len;
    lineProducts(full, all ? null : codes, base, len, lanes, r, b);
    const missing = len - seen[a];
    if (all || missing === 0) {
      solveFactored(whole, b, 1);
    } else {
      if (ownOf < 0 || !sameMissing(s, ownOf, a)) {
        if (missing < seen[a]) {
          g.set(gram);
          for (let p = missPtr[a]; p < missPtr[a + 1]; p++) addOuter(g, fixed, missIdx[p] * r, r, -1);
        } else {
          g.fill(0);
          for (let e = 0; e < len; e++) if (codes[base + e] === Cell.Valid) addOuter(g, fixed, e * r, r, 1);
        }
        symmetrize(g, r);
        factorSpd(g, r, own);
        ownOf = a;
      }
      solveFactored(own, b, 1);
    }
    if (b.every(Number.isFinite)) out.set(b, a * r);
    if (resid) sq += lineResidual(s, a, lanes, out, r);
  }
  return sq;
}

/** Copy the lower triangle of the r x r matrix g onto its upper one. */
function symmetrize(g: Float64Array, r: number): void {
  for (let k = 0; k < r; k++) for (let l = 0; l < k; l++) g[l * r + k] = g[k * r + l];
}

/** Whether lines a0 and a of `s` miss the same cells (and so have the same normal matrix in {@link alsHalf}). */
function sameMissing(s: Side, a0: number, a: number): boolean {
  const { missPtr, missIdx } = s;
  const count = missPtr[a + 1] - missPtr[a];
  if (missPtr[a0 + 1] - missPtr[a0] !== count) return false;
  const p0 = missPtr[a0];
  const p = missPtr[a];
  for (let k = 0; k < count; k++) if (missIdx[p0 + k] !== missIdx[p + k]) return false;
  return true;
}

/**
 * A factor (len rows of r values) laid out LANES values a row, its values
 * first and zeros after: the line loops below then take six products a cell
 * without a test of the rank for each. A product with a zero adds +0 to a
 * sum that started from +0 (never -0) and so leaves it as it is, and the
 * sums past the rank are not used: the same values as r products a cell.
 */
function wide(fixed: Float64Array, len: number, r: number): Float64Array {
  // Internal assertion: ranks stop at IMPUTE_MAX_RANK.
  if (r > LANES) throw new Error(`low-rank fill at rank ${r}, above ${LANES}`);
  const w = new Float64Array(len * LANES);
  for (let e = 0; e < len; e++) for (let k = 0; k < r; k++) w[e * LANES + k] = fixed[e * r + k];
  return w;
}

/**
 * b[k] = the sum over the line's cells e (its valid ones, or all with
 * `codes` null) of x_e fixed_e,k, in ascending e from 0, for k < r (`w`:
 * the fixed factor laid out by {@link wide}). The sums are kept in locals
 * and b is written once at the end (summed into b cell by cell, this loop
 * took a quarter of a psnr:60 pack of bench/'s basin-stack).
 */
function lineProducts(full: Float64Array, codes: Uint8Array | null, base: number, len: number, w: Float64Array, r: number, b: Float64Array): void {
  let b0 = 0;
  let b1 = 0;
  let b2 = 0;
  let b3 = 0;
  let b4 = 0;
  let b5 = 0;
  for (let e = 0, f = 0; e < len; e++, f += LANES) {
    if (codes !== null && codes[base + e] !== Cell.Valid) continue;
    const xc = full[base + e];
    b0 += xc * w[f];
    b1 += xc * w[f + 1];
    b2 += xc * w[f + 2];
    b3 += xc * w[f + 3];
    b4 += xc * w[f + 4];
    b5 += xc * w[f + 5];
  }
  // Stored without an array of the six: this runs once a line, every sweep.
  b[0] = b0;
  if (r > 1) b[1] = b1;
  if (r > 2) b[2] = b2;
  if (r > 3) b[3] = b3;
  if (r > 4) b[4] = b4;
  if (r > 5) b[5] = b5;
}

/** Add sign x f f^T to the lower triangle of g, where f is fixed[at .. at + r). */
function addOuter(g: Float64Array, fixed: Float64Array, at: number, r: number, sign: number): void {
  for (let k = 0; k < r; k++) {
    const fk = sign * fixed[at + k];
    for (let l = 0; l <= k; l++) g[k * r + l] += fk * fixed[at + l];
  }
}

/**
 * Sum of squared residuals x - (out_a . fixed_e) over the valid cells of
 * line a (`w`: the fixed factor laid out by {@link wide}; the line's factor
 * in locals, zeros past the rank): each dot product summed from +0 in
 * ascending k.
 */
function lineResidual(s: Side, a: number, w: Float64Array, out: Float64Array, r: number): number {
  const { len, codes, full } = s;
  const base = a * len;
  const o = a * r;
  let sq = 0;
  const o0 = out[o];
  const o1 = r > 1 ? out[o + 1] : 0;
  const o2 = r > 2 ? out[o + 2] : 0;
  const o3 = r > 3 ? out[o + 3] : 0;
  const o4 = r > 4 ? out[o + 4] : 0;
  const o5 = r > 5 ? out[o + 5] : 0;
  for (let e = 0, f = 0; e < len; e++, f += LANES) {
    if (codes[base + e] !== Cell.Valid) continue;
    const sum = 0 + o0 * w[f] + o1 * w[f + 1] + o2 * w[f + 2] + o3 * w[f + 3] + o4 * w[f + 4] + o5 * w[f + 5];
    const d = full[base + e] - sum;
    sq += d * d;
  }
  return sq;
}

/** Sum of squared residuals of U V^T over the valid cells (by columns: `s` is the columns' side). */
function misfit(s: Side, u: Float64Array, v: Float64Array, r: number): number {
  const w = wide(u, s.len, r);
  let sq = 0;
  for (let a = 0; a < s.lines; a++) sq += lineResidual(s, a, w, v, r);
  return sq;
}

/**
 * Alternating least squares sweeps: at most per trial rank, and over all
 * ranks of a tile (which bounds the work of a tile whose valid cells no low
 * rank fits); the most sweeps a rank may still need, at its current pace,
 * to reach the target; and the RMS misfit, in tolerances, below which a fit
 * counts as converged. Then the largest rank tried.
 */
const ALS_ITERATIONS = 150;
const ALS_BUDGET = 240;
const ALS_PATIENCE = 40;
const ALS_DONE = 0.01;
const IMPUTE_MAX_RANK = 6;
/** Side of the blocks of cells {@link side} transposes at a time. */
const TRANSPOSE_BLOCK = 32;
/** Values a row of a factor laid out by {@link wide}: IMPUTE_MAX_RANK. */
const LANES = 6;
/** The RMS misfit over the valid cells, in tolerances, that a fit must reach for its rank to fill the missing cells. */
const FIT_TARGET = 0.5;
/**
 * Most cells of the block of valid cells that {@link beyondReach} takes
 * (its Gram matrix costs about K^2 / 2 products a cell, K <= 128 for a
 * block 128 cells long). On bench/'s basin-stack at psnr:80, evenly spaced
 * quarters of the fully valid columns of its 128 x 2048 and 128 x 3072 tiles
 * had tails 2.0 to 3.0 times the target (the whole ones, 8.0 to 12.3);
 * at rel:1e-3, 0.02 to 0.12 (scratch measurement).
 */
const BLOCK_CELLS = 1 << 17;
/** Rounding margin of the block's tail, in units of K (len + K) eps times its energy (see {@link beyondReach}; common practice, no source). */
const BLOCK_MARGIN = 8;
