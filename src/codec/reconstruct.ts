/**
 * The reconstruction arithmetic, shared by the decoder and by the encoder's
 * verification (spec/FORMAT.md, "Reconstruction"). Every operation is one
 * IEEE 754 binary64 operation with round-to-nearest-even, in the order
 * written here; JavaScript has no fused multiply-add, so none is used.
 */

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
  out.fill(0, 0, m * n);
  for (let i = 0; i < m; i++) {
    const row = i * n;
    for (let k = 0; k < r; k++) {
      const lik = l[i * r + k];
      const wk = k * n;
      // i, k, j loop order: per cell the additions still run in rank order.
      for (let j = 0; j < n; j++) out[row + j] += lik * w[wk + j];
    }
  }
  for (let c = 0; c < m * n; c++) out[c] += center;
}

/** Residual: out[c] = out[c] + q[c] * step, for every cell. */
export function addResidual(out: Float64Array, q: Int32Array, step: number): void {
  for (let c = 0; c < q.length; c++) out[c] += q[c] * step;
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
 * On the tile's first row every predictor takes a (0 in the first cell), on
 * its first column b: the same as the Lorenzo predictor with zeros outside.
 */
export const Predictor = { None: 0, Lorenzo: 1, Left: 2, Up: 3, Average: 4, Median: 5 } as const;
export type Predictor = (typeof Predictor)[keyof typeof Predictor];
/** The largest predictor id. */
export const MAX_PREDICTOR = 5;

/** The prediction of an interior cell from a (left), b (up), c (up-left). */
function interior(kind: number, a: number, b: number, c: number): number {
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

/** Inverse of {@link predict}, in place: q = d + prediction, raster order. False if a q leaves +-limit. */
export function unpredict(d: Int32Array, m: number, n: number, limit: number, kind: number = Predictor.Lorenzo): boolean {
  if (kind === Predictor.None) return true;
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const p = i === 0 ? (j === 0 ? 0 : d[c - 1]) : j === 0 ? d[c - n] : interior(kind, d[c - 1], d[c - n], d[c - n - 1]);
      const q = d[c] + p;
      if (q > limit || q < -limit) return false;
      d[c] = q;
    }
  }
  return true;
}

/** The prediction residual of q with predictor `kind`, or null if one exceeds `limit`. */
export function predict(q: Int32Array, m: number, n: number, limit: number, kind: number = Predictor.Lorenzo): Int32Array | null {
  const d = new Int32Array(q.length);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const p = kind === Predictor.None ? 0 : i === 0 ? (j === 0 ? 0 : q[c - 1]) : j === 0 ? q[c - n] : interior(kind, q[c - 1], q[c - n], q[c - n - 1]);
      const v = q[c] - p;
      if (v > limit || v < -limit) return null;
      d[c] = v;
    }
  }
  return d;
}

/** A copy of q whose cells not Valid (class code non-zero) hold their prediction, so their residual is 0. */
export function predictedFill(q: Int32Array, codes: Uint8Array, m: number, n: number, limit: number, kind: number): Int32Array {
  const out = q.slice();
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
 * (spec/FORMAT.md section 11): the residual q x step added in place when
 * there is one, then rounding to the output dtype. The decoder and the
 * encoder's candidate check both call this, so they cannot drift apart.
 */
export function reconstruct(acc: Float64Array, q: Int32Array | null, step: number, out: Float32Array | Float64Array): void {
  if (q !== null) addResidual(acc, q, step);
  roundTo(acc, out);
}

/** Round binary64 values to the output dtype (binary32: round-to-nearest-even). */
export function roundTo(values: Float64Array, out: Float32Array | Float64Array): void {
  out.set(values);
}
