/**
 * The reconstruction arithmetic, shared by the decoder and by the encoder's
 * verification (spec/FORMAT.md, "Reconstruction"). Every operation is one
 * IEEE 754 binary64 operation with round-to-nearest-even, in the order
 * written here; JavaScript has no fused multiply-add, so none is used.
 */
import { blendDecodeKernel } from '../wasm/blend.js';
import { blendEncodeKernel, predictPlainKernel } from '../wasm/finish.js';
import { lowRankKernel } from '../wasm/lowrank.js';

/**
 * Low-rank part: out[i,j] = ((+0 + l[i,0]*w[0,j]) + l[i,1]*w[1,j] + ...) + center,
 * with the sum taken in increasing rank order.
 * `l` is m x r row-major (l[i*r+k]), `w` is r x n row-major (w[k*n+j]).
 */
export function lowRank(
  l: Float64Array,
  w: Float64Array,
  m: number,
  n: number,
  r: number,
  center: number,
  out: Float64Array,
): void {
  // The same operations in the same order as the formula: each row starts at +0 (so that a first
  // product of -0 gives +0, as 0 + x does), then takes the ranks in increasing order, up to four per
  // pass over the row (their partial sums kept in a register, added left to right as written), and the
  // centre in the last pass. Four ranks a pass load and store the row a quarter as often as one.
  const cells = m * n;
  if (r === 0) {
    out.fill(0 + center, 0, cells);
    return;
  }
  // The WebAssembly kernel where there is one (the same bits; faster at every rank, copies in and out included: bench/kernels.ts).
  if (lowRankKernel(l, w, m, n, r, center, out)) return;
  out.fill(0, 0, cells);
  for (let i = 0; i < m; i++) {
    const row = i * n;
    const li = i * r;
    let k = 0;
    for (; r - k > 4; k += 4) {
      const a = l[li + k];
      const b = l[li + k + 1];
      const c = l[li + k + 2];
      const d = l[li + k + 3];
      const w0 = k * n;
      for (let j = 0; j < n; j++) out[row + j] = out[row + j] + a * w[w0 + j] + b * w[w0 + n + j] + c * w[w0 + 2 * n + j] + d * w[w0 + 3 * n + j];
    }
    lastRanks(l, li + k, w, k * n, n, r - k, center, out, row);
  }
}

/** The last 1 to 4 ranks of a row of {@link lowRank} and the centre, in one pass: out = (out + sum of products, in order) + center. */
function lastRanks(l: Float64Array, lk: number, w: Float64Array, wk: number, n: number, left: number, center: number, out: Float64Array, row: number): void {
  const a = l[lk];
  if (left === 1) {
    for (let j = 0; j < n; j++) out[row + j] = out[row + j] + a * w[wk + j] + center;
    return;
  }
  const b = l[lk + 1];
  if (left === 2) {
    for (let j = 0; j < n; j++) out[row + j] = out[row + j] + a * w[wk + j] + b * w[wk + n + j] + center;
    return;
  }
  const c = l[lk + 2];
  if (left === 3) {
    for (let j = 0; j < n; j++) out[row + j] = out[row + j] + a * w[wk + j] + b * w[wk + n + j] + c * w[wk + 2 * n + j] + center;
    return;
  }
  const d = l[lk + 3];
  for (let j = 0; j < n; j++) out[row + j] = out[row + j] + a * w[wk + j] + b * w[wk + n + j] + c * w[wk + 2 * n + j] + d * w[wk + 3 * n + j] + center;
}

/**
 * Predictors of residual codes from their causal neighbours a (left), b (up)
 * and c (up-left), all published:
 * - Lorenzo: a + b - c, the 2-D Lorenzo predictor (Ibarria, Lindstrom,
 *   Rossignac and Szymczak, Eurographics 2003);
 * - Left: a, and Up: b, one-dimensional differences (differential pulse-code
 *   modulation, C. C. Cutler, US patent 2,605,361, 1952);
 * - Average: floor((a + b) / 2), predictor 7 of lossless JPEG (ITU-T T.81, 1992);
 * - Median: the median edge detector of LOCO-I (Weinberger, Seroussi and
 *   Sapiro, IEEE Trans. Image Processing 9(8), 2000): min(a, b) if
 *   c >= max(a, b), max(a, b) if c <= min(a, b), else a + b - c.
 * - Blend: a weighted mean of five predictions (left, up, Lorenzo, the
 *   Lorenzo step along the row above, linear extrapolation along the row),
 *   each weighted by the inverse of its recent error around the cell, in the
 *   manner of the blending predictors of Seemann and Tischer ("Generalized
 *   locally adaptive DPCM", DCC 1997) and Meyer and Tischer (TMW, DCC 1997);
 *   in exact integer arithmetic (see {@link blendWalk}).
 * On the tile's first row every predictor takes a (0 in the first cell), on
 * its first column b: the same as the Lorenzo predictor with zeros outside.
 */
export const Predictor = { None: 0, Lorenzo: 1, Left: 2, Up: 3, Average: 4, Median: 5, Blend: 6 } as const;
export type Predictor = (typeof Predictor)[keyof typeof Predictor];
/** The largest predictor id. */
export const MAX_PREDICTOR = 6;

/** Predictions the blend weighs. */
const BLEND_PARTS = 5;
/** A blend part's recorded error is capped here, so every weight stays at least 2. */
const BLEND_ERR_CAP = 8191;

/**
 * The blend predictor's walk over a tile in raster order: for each cell,
 * the prediction p from the codes already settled, then `settle(c, p)`
 * gives the cell's code q[c] (written into q), or NaN to stop (the walk then
 * returns false). With `settle` null the walk decodes: q holds the
 * differences, each becomes q[c] + p, and a code beyond +-`limit` stops the
 * walk (no call a cell: a read of the volcano grid's one tile at rel:1e-3
 * about 4% faster than through a settle). On the first row p is the cell to the left (0 in the
 * first cell), on the first column the cell above. Inside, with W, N, NW
 * the left, up and up-left codes, NE the up-right code (N in the last
 * column), WW two to the left (W in column 1) and NNE two up and one right
 * (NE in row 1 or the last column), the parts are
 *   P0 = W, P1 = N, P2 = W + N - NW, P3 = N + NE - NNE, P4 = 2 W - WW;
 * part k's error at a settled interior cell is min(|q - Pk|, 8191) (0 on
 * the first row and column), its activity e_k the sum of its errors at the
 * left, up, up-left and up-right cells (up-right: up in the last column),
 * its weight w_k = floor(65536 / (1 + e_k)), and
 *   p = floor((sum w_k Pk + floor(W_sum / 2)) / W_sum),   W_sum = sum w_k,
 * all exact integers (every sum stays below 2^53).
 */
function blendWalk(q: Int32Array, m: number, n: number, settle: ((c: number, p: number) => number) | null, limit = 0): boolean {
  const weight = blendWeights();
  if (settle === null) {
    // Decoding: the WebAssembly kernel where there is one (the same codes; src/wasm/blend.ts).
    const done = blendDecodeKernel(q, m, n, limit, weight);
    if (done !== null) return done;
  }
  // Errors on the first row and column are 0. An interior cell's activity for part k is its left
  // error (carried in a local, eK) plus `above[5 j + k]`, the sum of the row above's errors at
  // j - 1, j and j + 1 (j counted twice in the last column, where up-right is up); the walk writes
  // those sums for the next row into `below` as each cell's errors become known, so a cell loads
  // five sums instead of twenty errors, and two rows of sums are all it keeps.
  let above = new Int32Array(BLEND_PARTS * n);
  let below = new Int32Array(BLEND_PARTS * n);
  for (let i = 0; i < m; i++) {
    const row = i * n;
    {
      // The first cell of the row: the cell above (0 in the first row).
      const p = i === 0 ? 0 : q[row - n];
      const v = settle === null ? q[row] + p : settle(row, p);
      if (settle === null ? v > limit || v < -limit : v !== v) return false;
      q[row] = v;
    }
    if (i === 0) {
      for (let c = 1; c < n; c++) {
        const p = q[c - 1];
        const v = settle === null ? q[c] + p : settle(c, p);
        if (settle === null ? v > limit || v < -limit : v !== v) return false;
        q[c] = v;
      }
      continue;
    }
    // The errors of the cell to the left (e) and two to the left (f), per part.
    let e0 = 0;
    let e1 = 0;
    let e2 = 0;
    let e3 = 0;
    let e4 = 0;
    let f0 = 0;
    let f1 = 0;
    let f2 = 0;
    let f3 = 0;
    let f4 = 0;
    for (let j = 1; j < n; j++) {
      const c = row + j;
      const w = q[c - 1];
      const nn = q[c - n];
      const last = j + 1 === n;
      const ne = last ? nn : q[c - n + 1];
      const p0 = w;
      const p1 = nn;
      const p2 = w + nn - q[c - n - 1];
      const p3 = nn + ne - (i >= 2 && !last ? q[c - 2 * n + 1] : ne);
      const p4 = 2 * w - (j >= 2 ? q[c - 2] : w);
      const u = BLEND_PARTS * j;
      const w0 = weight[e0 + above[u]];
      const w1 = weight[e1 + above[u + 1]];
      const w2 = weight[e2 + above[u + 2]];
      const w3 = weight[e3 + above[u + 3]];
      const w4 = weight[e4 + above[u + 4]];
      const total = w0 + w1 + w2 + w3 + w4;
      const num = w0 * p0 + w1 * p1 + w2 * p2 + w3 * p3 + w4 * p4 + (total >> 1);
      let p = Math.floor(num / total);
      // Exact floor division (the quotient of doubles may round across an integer).
      if (p * total > num) p--;
      else if ((p + 1) * total <= num) p++;
      const v = settle === null ? q[c] + p : settle(c, p);
      if (settle === null ? v > limit || v < -limit : v !== v) return false;
      q[c] = v;
      const g0 = capErr(v - p0);
      const g1 = capErr(v - p1);
      const g2 = capErr(v - p2);
      const g3 = capErr(v - p3);
      const g4 = capErr(v - p4);
      // The next row's sums at j - 1: errors at j - 2, j - 1 and j (column 0's are 0).
      const t = u - BLEND_PARTS;
      below[t] = f0 + e0 + g0;
      below[t + 1] = f1 + e1 + g1;
      below[t + 2] = f2 + e2 + g2;
      below[t + 3] = f3 + e3 + g3;
      below[t + 4] = f4 + e4 + g4;
      f0 = e0;
      f1 = e1;
      f2 = e2;
      f3 = e3;
      f4 = e4;
      e0 = g0;
      e1 = g1;
      e2 = g2;
      e3 = g3;
      e4 = g4;
    }
    // The last column's sums: up-left, up and up-right = up.
    const t = BLEND_PARTS * (n - 1);
    below[t] = f0 + 2 * e0;
    below[t + 1] = f1 + 2 * e1;
    below[t + 2] = f2 + 2 * e2;
    below[t + 3] = f3 + 2 * e3;
    below[t + 4] = f4 + 2 * e4;
    const swap = above;
    above = below;
    below = swap;
  }
  return true;
}

function capErr(d: number): number {
  const a = d < 0 ? -d : d;
  return a > BLEND_ERR_CAP ? BLEND_ERR_CAP : a;
}

let weights: Int32Array | null = null;
/** floor(65536 / (1 + e)) for every activity e a blend can have (0 .. 4 x the error cap). */
export function blendWeights(): Int32Array {
  if (weights === null) {
    weights = new Int32Array(4 * BLEND_ERR_CAP + 1);
    for (let e = 0; e < weights.length; e++) weights[e] = Math.floor(65536 / (1 + e));
  }
  return weights;
}

/** The prediction of an interior cell from a (left), b (up), c (up-left). */
export function interior(kind: number, a: number, b: number, c: number): number {
  switch (kind) {
    case Predictor.Lorenzo:
      return a + b - c;
    case Predictor.Left:
      return a;
    case Predictor.Up:
      return b;
    case Predictor.Average:
      return Math.floor((a + b) / 2);
    default: {
      const lo = a < b ? a : b;
      const hi = a < b ? b : a;
      return c >= hi ? lo : c <= lo ? hi : a + b - c;
    }
  }
}

/**
 * Walk a tile in raster order with predictor `kind`: for each cell, its
 * prediction p from the codes already settled (the edge rule, then the
 * predictor; 0 for None), then `settle(c, p)` gives the cell's code, written
 * into q, or NaN to stop (the walk then returns false). The encoder's way
 * to choose each code knowing its prediction.
 */
export function walkPredictor(q: Int32Array, m: number, n: number, kind: number, settle: (c: number, p: number) => number): boolean {
  if (kind === Predictor.Blend) return blendWalk(q, m, n, settle);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const p = kind === Predictor.None ? 0 : i === 0 ? (j === 0 ? 0 : q[c - 1]) : j === 0 ? q[c - n] : interior(kind, q[c - 1], q[c - n], q[c - n - 1]);
      const v = settle(c, p);
      if (v !== v) return false;
      q[c] = v;
    }
  }
  return true;
}

/** Inverse of {@link predict}, in place: q = d + prediction, raster order. False if a q leaves +-limit. */
export function unpredict(d: Int32Array, m: number, n: number, limit: number, kind: number = Predictor.Lorenzo): boolean {
  if (kind === Predictor.None) return true;
  if (kind === Predictor.Blend) {
    // No settle: the walk adds each prediction to d in place (the decoder's case, without a call a cell).
    return blendWalk(d, m, n, null, limit);
  }
  if (m === 0 || n === 0) return true;
  // The edge rule: the first row predicts from the left (0 in the first cell), the first column from above.
  let a = 0;
  for (let j = 0; j < n; j++) {
    a = d[j] + a;
    if (a > limit || a < -limit) return false;
    d[j] = a;
  }
  for (let i = 1; i < m; i++) {
    const row = i * n;
    const q = d[row] + d[row - n];
    if (q > limit || q < -limit) return false;
    d[row] = q;
    if (!unpredictInterior(d, row, n, limit, kind)) return false;
  }
  return true;
}

/**
 * Cells 1 .. n-1 of the row starting at `row` (not the first) for {@link
 * unpredict}: one loop per predictor, with the left value carried, the
 * same sums as {@link interior} gives (exact: every value is within 2^30).
 */
function unpredictInterior(d: Int32Array, row: number, n: number, limit: number, kind: number): boolean {
  const end = row + n;
  let a = d[row];
  switch (kind) {
    case Predictor.Lorenzo:
      for (let c = row + 1; c < end; c++) {
        a = d[c] + (a + d[c - n] - d[c - n - 1]);
        if (a > limit || a < -limit) return false;
        d[c] = a;
      }
      return true;
    case Predictor.Left:
      for (let c = row + 1; c < end; c++) {
        a = d[c] + a;
        if (a > limit || a < -limit) return false;
        d[c] = a;
      }
      return true;
    case Predictor.Up:
      for (let c = row + 1; c < end; c++) {
        a = d[c] + d[c - n];
        if (a > limit || a < -limit) return false;
        d[c] = a;
      }
      return true;
    default:
      for (let c = row + 1; c < end; c++) {
        a = d[c] + interior(kind, a, d[c - n], d[c - n - 1]);
        if (a > limit || a < -limit) return false;
        d[c] = a;
      }
      return true;
  }
}

/**
 * The rough bits (sum over cells of the bit length of |difference|) of the
 * prediction residual of q with each of the predictors Lorenzo, Left, Up,
 * Average and Median, in one pass and without storing the residuals: entry
 * k is for predictor k + 1, Infinity where a difference exceeds `limit`
 * (where {@link predict} gives null). The same figures as bit lengths of
 * predict()'s output, for the encoder's choice of predictor.
 */
export function predictorBits(q: Int32Array, m: number, n: number, limit: number): Float64Array {
  const sums = new Float64Array(PREDICTOR_SUMS);
  for (let i = 0; i < m; i++) if (!predictorBitsRow(q, n, limit, i, sums)) return predictorBitsOf(null);
  return predictorBitsOf(sums);
}

/** Length of the running sums of {@link predictorBitsRow}: five bit sums and the flags of the predictors whose differences exceeded the limit. */
export const PREDICTOR_SUMS = 6;

/**
 * Row i's part of {@link predictorBits}, added into `sums`; it reads rows i
 * and i - 1 of q only, so an encoder may add each row as soon as its codes
 * are settled. False when a difference on the edge (the same for every
 * predictor) exceeds `limit`: every entry is then Infinity. `small`: the
 * caller knows every |q| in rows i - 1 and i is at most limit / 4, so no
 * difference (at most four codes' magnitudes) can exceed the limit, and
 * the row is summed without checking.
 */
export function predictorBitsRow(q: Int32Array, n: number, limit: number, i: number, sums: Float64Array, small = false): boolean {
  if (small) {
    smallBitsRow(q, n, i, sums);
    return true;
  }
  let lorenzo = 0;
  let left = 0;
  let up = 0;
  let average = 0;
  let median = 0;
  const bits = (v: number) => 32 - Math.clz32(v < 0 ? -v : v);
  let over = 0;
  for (let j = 0; j < n; j++) {
    const c = i * n + j;
    if (i === 0 || j === 0) {
      // The edge rule is the same for every predictor.
      const v = q[c] - (i === 0 ? (j === 0 ? 0 : q[c - 1]) : q[c - n]);
      if (v > limit || v < -limit) return false;
      const b = bits(v);
      lorenzo += b;
      left += b;
      up += b;
      average += b;
      median += b;
      continue;
    }
    const x = q[c];
    const a = q[c - 1];
    const b = q[c - n];
    const d = q[c - n - 1];
    const lo = a < b ? a : b;
    const hi = a < b ? b : a;
    const v1 = x - (a + b - d);
    const v2 = x - a;
    const v3 = x - b;
    const v4 = x - Math.floor((a + b) / 2);
    const v5 = x - (d >= hi ? lo : d <= lo ? hi : a + b - d);
    lorenzo += bits(v1);
    left += bits(v2);
    up += bits(v3);
    average += bits(v4);
    median += bits(v5);
    if (v1 > limit || v1 < -limit) over |= 1;
    if (v2 > limit || v2 < -limit) over |= 2;
    if (v3 > limit || v3 < -limit) over |= 4;
    if (v4 > limit || v4 < -limit) over |= 8;
    if (v5 > limit || v5 < -limit) over |= 16;
  }
  // Sums of whole bit counts, exact in binary64: the same totals in any grouping.
  sums[0] += lorenzo;
  sums[1] += left;
  sums[2] += up;
  sums[3] += average;
  sums[4] += median;
  sums[5] = sums[5] | over;
  return true;
}

/**
 * {@link predictorBitsRow} of a row whose differences are known to be
 * within the limit (every |q| of rows i - 1 and i at most limit / 4, so
 * each fits an int32): the same sums, with the left, up and up-left codes
 * carried along the row, floor((a + b) / 2) as (a + b) >> 1 (an arithmetic
 * shift floors), |v| as (v ^ s) - s with s = v >> 31 (no branch on the
 * sign, which goes either way on a residual), and each predictor's bit
 * lengths summed as 32 per cell less the leading zeros.
 */
function smallBitsRow(q: Int32Array, n: number, i: number, sums: Float64Array): void {
  const row = i * n;
  if (i === 0) {
    // The first row: every cell is an edge cell, the difference from the left (0 before the first).
    let zeros = 0;
    let a = 0;
    for (let j = 0; j < n; j++) {
      const x = q[j];
      const v = x - a;
      zeros += Math.clz32((v ^ (v >> 31)) - (v >> 31));
      a = x;
    }
    const b = 32 * n - zeros;
    sums[0] += b;
    sums[1] += b;
    sums[2] += b;
    sums[3] += b;
    sums[4] += b;
    return;
  }
  // The first column: the difference from the cell above, for every predictor.
  let a = q[row];
  let d = q[row - n];
  const e = a - d;
  const edge = 32 - Math.clz32(e < 0 ? -e : e);
  let z1 = 0;
  let z2 = 0;
  let z3 = 0;
  let z4 = 0;
  let z5 = 0;
  for (let j = 1; j < n; j++) {
    const x = q[row + j];
    const b = q[row - n + j];
    const lo = a < b ? a : b;
    const hi = a < b ? b : a;
    const v1 = x - (a + b - d);
    const v2 = x - a;
    const v3 = x - b;
    const v4 = x - ((a + b) >> 1);
    const v5 = x - (d >= hi ? lo : d <= lo ? hi : a + b - d);
    z1 += Math.clz32((v1 ^ (v1 >> 31)) - (v1 >> 31));
    z2 += Math.clz32((v2 ^ (v2 >> 31)) - (v2 >> 31));
    z3 += Math.clz32((v3 ^ (v3 >> 31)) - (v3 >> 31));
    z4 += Math.clz32((v4 ^ (v4 >> 31)) - (v4 >> 31));
    z5 += Math.clz32((v5 ^ (v5 >> 31)) - (v5 >> 31));
    a = x;
    d = b;
  }
  const full = 32 * (n - 1) + edge;
  sums[0] += full - z1;
  sums[1] += full - z2;
  sums[2] += full - z3;
  sums[3] += full - z4;
  sums[4] += full - z5;
}

/** The five figures of {@link predictorBits} from the sums of every row (null: an edge difference exceeded the limit). */
export function predictorBitsOf(sums: Float64Array | null): Float64Array {
  if (sums === null) return Float64Array.of(Infinity, Infinity, Infinity, Infinity, Infinity);
  const out = sums.slice(0, 5);
  for (let k = 0; k < 5; k++) if (sums[5] & (1 << k)) out[k] = Infinity;
  return out;
}

/** The prediction residual of q with predictor `kind` (into `d`, of q's length: a new grid by default), or null if one exceeds `limit`. */
export function predict(q: Int32Array, m: number, n: number, limit: number, kind: number = Predictor.Lorenzo, d: Int32Array = new Int32Array(q.length)): Int32Array | null {
  if (kind === Predictor.Blend) {
    // The encoder's WebAssembly kernel where there is one (the same differences; src/wasm/finish.ts).
    const done = blendEncodeKernel(q, null, m, n, limit, true, blendWeights(), d, null);
    if (done !== null) return done ? d : null;
    const work = q.slice();
    const ok = blendWalk(work, m, n, (c, p) => {
      const v = q[c] - p;
      if (v > limit || v < -limit) return Number.NaN;
      d[c] = v;
      return q[c];
    });
    return ok ? d : null;
  }
  if (kind !== Predictor.None) {
    // The encoder's WebAssembly kernel where it applies (the same differences; src/wasm/finish.ts).
    if (limit >= 2 ** 30 && predictPlainKernel(q, d, m, n, kind)) return d;
    return predictPlain(q, d, m, n, limit, kind) ? d : null;
  }
  for (let c = 0; c < q.length; c++) {
    const v = q[c];
    if (v > limit || v < -limit) return null;
    d[c] = v;
  }
  return d;
}

/**
 * {@link predict} with predictors 1 to 5 into d: the edge rule on the first
 * row and column, then one loop a predictor over each row's interior with
 * the left and up-left codes carried (the encoder forms its chosen
 * predictor's differences for every candidate it codes). False if a
 * difference leaves +-limit.
 */
function predictPlain(q: Int32Array, d: Int32Array, m: number, n: number, limit: number, kind: number): boolean {
  for (let i = 0; i < m; i++) {
    const row = i * n;
    // Edge: the left code on the first row (0 in the first cell), the code above in the first column.
    const first = q[row] - (i === 0 ? 0 : q[row - n]);
    if (first > limit || first < -limit) return false;
    d[row] = first;
    if (i === 0) {
      for (let j = 1; j < n; j++) {
        const v = q[j] - q[j - 1];
        if (v > limit || v < -limit) return false;
        d[j] = v;
      }
      continue;
    }
    let a = q[row];
    let c = q[row - n];
    let over = false;
    if (kind === Predictor.Lorenzo) {
      for (let j = 1; j < n; j++) {
        const x = q[row + j];
        const b = q[row - n + j];
        const v = x - (a + b - c);
        if (v > limit || v < -limit) over = true;
        d[row + j] = v;
        a = x;
        c = b;
      }
    } else if (kind === Predictor.Left) {
      for (let j = 1; j < n; j++) {
        const x = q[row + j];
        const v = x - a;
        if (v > limit || v < -limit) over = true;
        d[row + j] = v;
        a = x;
      }
    } else if (kind === Predictor.Up) {
      for (let j = 1; j < n; j++) {
        const v = q[row + j] - q[row - n + j];
        if (v > limit || v < -limit) over = true;
        d[row + j] = v;
      }
    } else if (kind === Predictor.Average) {
      for (let j = 1; j < n; j++) {
        const x = q[row + j];
        const b = q[row - n + j];
        const v = x - Math.floor((a + b) / 2);
        if (v > limit || v < -limit) over = true;
        d[row + j] = v;
        a = x;
      }
    } else {
      for (let j = 1; j < n; j++) {
        const x = q[row + j];
        const b = q[row - n + j];
        const v = x - interior(kind, a, b, c);
        if (v > limit || v < -limit) over = true;
        d[row + j] = v;
        a = x;
        c = b;
      }
    }
    if (over) return false;
  }
  return true;
}

/**
 * The blend's differences of q, with the cells whose class in `codes` is
 * not Valid (when `codes` is given) taken as {@link predictedFill} fills
 * them, into `out` (q's length): predict(predictedFill(q, codes, ...),
 * ..., Predictor.Blend), or predict(q, ..., Predictor.Blend) without
 * `codes`, in one walk where the kernel is to be had, written into the
 * caller's array rather than a new one. False where predict() gives null.
 */
export function blendDifferences(q: Int32Array, codes: Uint8Array | null, m: number, n: number, limit: number, out: Int32Array): boolean {
  const done = blendEncodeKernel(q, codes, m, n, limit, true, blendWeights(), out, null);
  if (done !== null) return done;
  const d = predict(codes === null ? q : predictedFill(q, codes, m, n, limit, Predictor.Blend), m, n, limit, Predictor.Blend);
  if (d === null) return false;
  out.set(d);
  return true;
}

/** A copy of q whose cells not Valid (class code non-zero) hold their prediction, so their residual is 0. */
export function predictedFill(q: Int32Array, codes: Uint8Array, m: number, n: number, limit: number, kind: number): Int32Array {
  const out = q.slice();
  if (kind === Predictor.Blend) {
    if (blendEncodeKernel(q, codes, m, n, limit, false, blendWeights(), null, out) !== null) return out;
    blendWalk(out, m, n, (c, p) => (codes[c] === 0 ? q[c] : Math.abs(p) <= limit ? p : 0));
    return out;
  }
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      if (codes[c] === 0) continue;
      const p = kind === Predictor.None ? 0 : i === 0 ? (j === 0 ? 0 : out[c - 1]) : j === 0 ? out[c - n] : interior(kind, out[c - 1], out[c - n], out[c - n - 1]);
      out[c] = Math.abs(p) <= limit ? p : 0;
    }
  }
  return out;
}

/**
 * The rest of a tile's reconstruction after {@link lowRank} has filled `acc`
 * (spec/FORMAT.md section 11): the residual q x step added when there is
 * one, then rounding to the output dtype. The decoder's only path to its
 * values. Returns false when a stored value is not finite (a damaged or
 * hostile payload, or a missing cell still to be overwritten: the caller
 * then looks closer), true when every one is.
 *
 * One loop per dtype, so each indexes a single typed-array kind; binary32
 * rounding is Math.fround, the same round-to-nearest-even as a store into a
 * Float32Array (ECMA-262, Number::toFloat32 / NumericToRawBytes; from memory).
 */
export function reconstruct(acc: Float64Array, q: Int32Array | null, step: number, out: Float32Array | Float64Array): boolean {
  if (out instanceof Float32Array) return q === null ? round32(acc, out) : residual32(acc, q, step, out);
  return q === null ? round64(acc, out) : residual64(acc, q, step, out);
}

// x - x is 0 for a finite x and NaN for an infinity or NaN: `bad` stays 0 while every value is finite.
function round32(acc: Float64Array, out: Float32Array): boolean {
  let bad = 0;
  for (let c = 0; c < out.length; c++) {
    const x = Math.fround(acc[c]);
    out[c] = x;
    bad += x - x;
  }
  return bad === 0;
}

function residual32(acc: Float64Array, q: Int32Array, step: number, out: Float32Array): boolean {
  let bad = 0;
  for (let c = 0; c < out.length; c++) {
    const x = Math.fround(withResidual(acc[c], q[c], step));
    out[c] = x;
    bad += x - x;
  }
  return bad === 0;
}

function round64(acc: Float64Array, out: Float64Array): boolean {
  let bad = 0;
  for (let c = 0; c < out.length; c++) {
    const x = acc[c];
    out[c] = x;
    bad += x - x;
  }
  return bad === 0;
}

function residual64(acc: Float64Array, q: Int32Array, step: number, out: Float64Array): boolean {
  let bad = 0;
  for (let c = 0; c < out.length; c++) {
    const x = withResidual(acc[c], q[c], step);
    out[c] = x;
    bad += x - x;
  }
  return bad === 0;
}

/** One cell of {@link reconstruct} before rounding to the dtype: the low-rank part plus its code times the step (the encoder checks a cell with it as it chooses its code). */
export function withResidual(acc: number, code: number, step: number): number {
  return acc + code * step;
}
