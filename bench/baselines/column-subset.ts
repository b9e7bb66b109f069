/**
 * Baseline 5: the column-subset approximation. Keep k evenly spaced columns
 * exactly (float32) and replace every other column by its least-squares
 * projection onto their span, stored as float32 coefficients in an
 * orthonormal basis of that span (modified Gram-Schmidt, twice; the decoder
 * rebuilds the same basis from the kept columns). k is the smallest that
 * meets the bound, found by bisection on decoded error; nothing is added for
 * pointwise bounds, so a field it cannot fit even at k = all columns fails.
 */
import { Reader, Writer } from './bytes.js';
import type { Codec } from './codec.js';
import { svdSkip } from './global-svd.js';
import { prepare, readMissing, writeMissing } from './missing.js';
import { measure, meets } from '../metrics.js';

/** Column indices floor((c + 1/2) n / k), c = 0..k-1. */
export function spacedColumns(n: number, k: number): number[] {
  return Array.from({ length: k }, (_, c) => Math.floor(((c + 0.5) * n) / k));
}

/** Orthonormal basis (each vector length m) of the given columns; dependent ones are dropped. */
function basis(columns: Float64Array[], m: number): Float64Array[] {
  const q: Float64Array[] = [];
  for (const col of columns) {
    if (q.length >= m) break; // the span is already everything
    const v = Float64Array.from(col);
    let norm0 = 0;
    for (let i = 0; i < m; i++) norm0 += v[i] * v[i];
    for (let pass = 0; pass < 2; pass++) {
      for (const b of q) {
        let dot = 0;
        for (let i = 0; i < m; i++) dot += b[i] * v[i];
        for (let i = 0; i < m; i++) v[i] -= dot * b[i];
      }
    }
    let norm = 0;
    for (let i = 0; i < m; i++) norm += v[i] * v[i];
    if (!(norm > 1e-24 * norm0) || norm === 0) continue;
    const inv = 1 / Math.sqrt(norm);
    for (let i = 0; i < m; i++) v[i] *= inv;
    q.push(v);
  }
  return q;
}

function column(values: ArrayLike<number>, rows: number, cols: number, j: number): Float64Array {
  const c = new Float64Array(rows);
  for (let i = 0; i < rows; i++) c[i] = values[i * cols + j];
  return c;
}

function encodeK(filled: Float64Array, rows: number, cols: number, k: number, head: (w: Writer) => void): Uint8Array {
  const kept = spacedColumns(cols, k);
  const isKept = new Uint8Array(cols);
  for (const j of kept) isKept[j] = 1;
  const stored = new Float32Array(rows * k);
  kept.forEach((j, c) => stored.set(Float32Array.from(column(filled, rows, cols, j)), c * rows));
  const q = basis(kept.map((_, c) => Float64Array.from(stored.subarray(c * rows, (c + 1) * rows))), rows);
  const coef = new Float32Array(q.length * (cols - k));
  let o = 0;
  for (let j = 0; j < cols; j++) {
    if (isKept[j]) continue;
    const a = column(filled, rows, cols, j);
    for (const b of q) {
      let dot = 0;
      for (let i = 0; i < rows; i++) dot += b[i] * a[i];
      coef[o++] = dot;
    }
  }
  const w = new Writer();
  head(w);
  w.u32(k);
  w.u32(q.length);
  w.section(new Uint8Array(stored.buffer));
  w.section(new Uint8Array(coef.buffer));
  return w.finish();
}

function decodeSubset(bytes: Uint8Array): Float32Array {
  const r = new Reader(bytes);
  const rows = r.u32();
  const cols = r.u32();
  const restore = readMissing(r, rows * cols);
  const k = r.u32();
  const rank = r.u32();
  const stored = new Float32Array(r.section().slice().buffer);
  const coef = new Float32Array(r.section().slice().buffer);
  r.end();
  if (stored.length !== rows * k || coef.length !== rank * (cols - k)) throw new Error('column-subset stream: bad section sizes');
  const kept = spacedColumns(cols, k);
  const q = basis(kept.map((_, c) => Float64Array.from(stored.subarray(c * rows, (c + 1) * rows))), rows);
  if (q.length !== rank) throw new Error('column-subset stream: basis rank differs from the encoder\'s');
  const out = new Float32Array(rows * cols);
  const isKept = new Int32Array(cols).fill(-1);
  kept.forEach((j, c) => (isKept[j] = c));
  let o = 0;
  const acc = new Float64Array(rows);
  for (let j = 0; j < cols; j++) {
    if (isKept[j] >= 0) {
      for (let i = 0; i < rows; i++) out[i * cols + j] = stored[isKept[j] * rows + i];
      continue;
    }
    acc.fill(0);
    for (const b of q) {
      const c = coef[o++];
      for (let i = 0; i < rows; i++) acc[i] += c * b[i];
    }
    for (let i = 0; i < rows; i++) out[i * cols + j] = acc[i];
  }
  restore(out);
  return out;
}

export const columnSubset: Codec = {
  id: 'column-subset',
  describe: 'k evenly spaced columns kept as float32, every other column projected onto their span by least squares (float32 coefficients), DEFLATE level 9; k by bisection; nothing added for pointwise bounds.',
  skip: (f) => svdSkip(f.rows, f.cols, 'the basis and projections'),
  encode(field, target) {
    const { rows, cols } = field;
    const p = prepare(field.values, field.fill);
    const head = (w: Writer): void => {
      w.u32(rows);
      w.u32(cols);
      writeMissing(w, field.values, p);
    };
    const ok = (bytes: Uint8Array): boolean => meets(measure(field.values, decodeSubset(bytes), field.fill, target.range), target);
    // Smallest k in 1..cols that meets the bound, assuming the error falls as k grows.
    let lo = 0;
    let hi = cols;
    let best: Uint8Array | null = null;
    while (hi - lo > 1) {
      const mid = (lo + hi) >> 1;
      const bytes = encodeK(p.filled, rows, cols, mid, head);
      if (ok(bytes)) {
        hi = mid;
        best = bytes;
      } else lo = mid;
    }
    // hi === cols is never tested by the loop: it keeps every column, and the harness checks it like any other output.
    return best ?? encodeK(p.filled, rows, cols, cols, head);
  },
  decode: decodeSubset,
};
