/**
 * The range finder's orthonormalization (src/linalg/truncated.ts,
 * orthonormalize, with householder, reflect and sumSquares of
 * src/linalg/householder.ts), entry file: the unpivoted Householder QR of a
 * column-major sketch and its Q formed explicitly (LAPACK dlarfg and dorg2r
 * conventions). Every binary64 operation is the JavaScript's, in its order
 * (each column's dot product summed in increasing row order, four columns
 * a pass; the updates, one independent operation an entry, two rows a
 * vector), so the same Q and tau bit for bit. Encoder-side only: compiled
 * by `npm run kernels` (scripts/kernels.mjs) into
 * src/wasm/kernels-bytes.ts, run by src/linalg/product.ts in the memory
 * its products hold.
 *
 * Memory (byte addresses, binary64): y (rows x cols column-major,
 * destroyed), q (rows x cols column-major, out), tau (cols, out).
 */

@inline
function at(p: usize, i: i32): usize {
  return p + (<usize>i << 3);
}

/** sumSquares(x, off, len): two sums, over the even and the odd offsets, added at the end. */
function sumSquares(x: usize, off: i32, len: i32): f64 {
  let s0: f64 = 0;
  let s1: f64 = 0;
  let i = 0;
  const end2 = len - (len & 1);
  for (; i < end2; i += 2) {
    const a = load<f64>(at(x, off + i));
    const b = load<f64>(at(x, off + i + 1));
    s0 += a * a;
    s1 += b * b;
  }
  if (i < len) {
    const a = load<f64>(at(x, off + i));
    s0 += a * a;
  }
  return s0 + s1;
}

/** householder(w, rows, i): tau, or 0 for a column already zero below row i. */
function householder(w: usize, rows: i32, i: i32): f64 {
  const ci = i * rows;
  const alpha = load<f64>(at(w, ci + i));
  const xn2 = sumSquares(w, ci + i + 1, rows - i - 1);
  if (xn2 === 0) return 0;
  const nrm = Math.sqrt(alpha * alpha + xn2);
  const beta = alpha >= 0 ? -nrm : nrm;
  const inv = 1 / (alpha - beta);
  for (let t = ci + i + 1; t < ci + rows; t++) store<f64>(at(w, t), load<f64>(at(w, t)) * inv);
  store<f64>(at(w, ci + i), beta);
  return (beta - alpha) / beta;
}

/** x[x0 + t] -= s v[t] for t in from .. rows - 1 (v = h's column), two rows a vector. */
@inline
function update(x: usize, x0: i32, v: usize, from: i32, rows: i32, s: f64): void {
  const sv = f64x2.splat(s);
  let t = from;
  for (; t + 1 < rows; t += 2) {
    const p = at(x, x0 + t);
    v128.store(p, f64x2.sub(v128.load(p), f64x2.mul(sv, v128.load(at(v, t)))));
  }
  if (t < rows) store<f64>(at(x, x0 + t), load<f64>(at(x, x0 + t)) - s * load<f64>(at(v, t)));
}

/** reflect(h, rows, i, ti, x, from, to): H_i = I - ti v v^T applied to columns from .. to - 1 of x. */
function reflect(h: usize, rows: i32, i: i32, ti: f64, x: usize, from: i32, to: i32): void {
  const v = at(h, i * rows);
  let c = from;
  for (; c + 3 < to; c += 4) {
    const x0 = c * rows;
    const x1 = x0 + rows;
    const x2 = x1 + rows;
    const x3 = x2 + rows;
    let s0 = load<f64>(at(x, x0 + i));
    let s1 = load<f64>(at(x, x1 + i));
    let s2 = load<f64>(at(x, x2 + i));
    let s3 = load<f64>(at(x, x3 + i));
    for (let t = i + 1; t < rows; t++) {
      const vt = load<f64>(at(v, t));
      s0 += vt * load<f64>(at(x, x0 + t));
      s1 += vt * load<f64>(at(x, x1 + t));
      s2 += vt * load<f64>(at(x, x2 + t));
      s3 += vt * load<f64>(at(x, x3 + t));
    }
    s0 *= ti;
    s1 *= ti;
    s2 *= ti;
    s3 *= ti;
    store<f64>(at(x, x0 + i), load<f64>(at(x, x0 + i)) - s0);
    store<f64>(at(x, x1 + i), load<f64>(at(x, x1 + i)) - s1);
    store<f64>(at(x, x2 + i), load<f64>(at(x, x2 + i)) - s2);
    store<f64>(at(x, x3 + i), load<f64>(at(x, x3 + i)) - s3);
    update(x, x0, v, i + 1, rows, s0);
    update(x, x1, v, i + 1, rows, s1);
    update(x, x2, v, i + 1, rows, s2);
    update(x, x3, v, i + 1, rows, s3);
  }
  for (; c < to; c++) {
    const x0 = c * rows;
    let s0 = load<f64>(at(x, x0 + i));
    for (let t = i + 1; t < rows; t++) s0 += load<f64>(at(v, t)) * load<f64>(at(x, x0 + t));
    s0 *= ti;
    store<f64>(at(x, x0 + i), load<f64>(at(x, x0 + i)) - s0);
    update(x, x0, v, i + 1, rows, s0);
  }
}

export function orthonormalize(y: usize, rows: i32, cols: i32, q: usize, tau: usize): void {
  for (let i = 0; i < cols; i++) {
    const ti = householder(y, rows, i);
    store<f64>(at(tau, i), ti);
    if (ti !== 0) reflect(y, rows, i, ti, y, i + 1, cols);
  }
  memory.fill(q, 0, <usize>(rows * cols) << 3);
  for (let c = 0; c < cols; c++) store<f64>(at(q, c * rows + c), 1);
  for (let i = cols - 1; i >= 0; i--) {
    const ti = load<f64>(at(tau, i));
    if (ti !== 0) reflect(y, rows, i, ti, q, i, cols);
  }
}
