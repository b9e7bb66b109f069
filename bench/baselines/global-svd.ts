/**
 * Baseline 4: one truncated SVD of the whole field (no tiles). The field
 * minus its mean is decomposed once (src/linalg/svd.ts); the left factor
 * U_r diag(s) and the right factor V_r^T are quantized with uniform steps
 * chosen from the error budget, as rankfield quantizes its factors, then
 * zigzag byte planes and DEFLATE.
 *
 * - RMSE bounds: the rank leaves a tail energy sum_{k>=r} s_k^2 within the
 *   budget (Eckart-Young); the rest of the budget goes to factor rounding.
 *   A few ranks above the smallest are tried and the smallest output kept.
 * - Pointwise bounds: the factors are followed by the residual quantized
 *   with step 2E (plain or Lorenzo-predicted, whichever is smaller), which
 *   makes the bound strict; the rank is searched for the fewest bytes.
 */
import { svd, type Svd } from '../../src/linalg/svd.js';
import { deflateSync } from 'fflate';
import { LEVEL, packInts, Reader, Writer } from './bytes.js';
import { pointwiseBudget, shrinkUntilMet, type Codec } from './codec.js';
import { lorenzoPredictor } from './lorenzo.js';
import { prepare, readMissing, writeMissing } from './missing.js';

/** Cost above which a full SVD is skipped: m * n * min(m, n) (about a few seconds here). */
export const SVD_COST_LIMIT = 5e8;

/** A reason to skip a whole-field O(m n min(m, n)) method on a large field, or null. */
export function svdSkip(rows: number, cols: number, what = 'a full SVD'): string | null {
  const cost = rows * cols * Math.min(rows, cols);
  return cost > SVD_COST_LIMIT ? `too slow here: ${what} of ${rows}x${cols} costs m n min(m, n) = ${cost.toExponential(1)}, over this run's limit of ${SVD_COST_LIMIT.toExponential(0)}` : null;
}

function deflatedSize(raw: Uint8Array): number {
  return deflateSync(raw, { level: LEVEL }).length;
}

/** Quantized factors of rank r whose rounding adds about `sse` squared error in total. */
function factorBlock(w: Writer, d: Svd, r: number, sse: number): void {
  const { m, n, k } = d;
  w.u32(r);
  if (r === 0) return;
  // ||dL W||^2 ~ r m dl^2 / 12 and ||L dW||^2 ~ sum_k s_k^2 n dw_k^2 / 12; half the budget each.
  const dl = Math.sqrt((6 * sse) / (r * m));
  w.f64(dl);
  const ql = new Float64Array(m * r);
  const qw = new Float64Array(r * n);
  for (let c = 0; c < r; c++) {
    const dw = Math.sqrt((6 * sse) / (r * n)) / d.s[c];
    w.f64(dw);
    for (let i = 0; i < m; i++) ql[i * r + c] = Math.round((d.u[i * k + c] * d.s[c]) / dl);
    for (let j = 0; j < n; j++) qw[c * n + j] = Math.round(d.v[j * k + c] / dw);
  }
  w.ints(ql);
  w.ints(qw);
}

/** Read a factor block and add centre + L W into acc (m x n). */
function readFactors(r: Reader, m: number, n: number, centre: number): Float64Array {
  const acc = new Float64Array(m * n).fill(centre);
  const rank = r.u32();
  if (rank === 0) return acc;
  const dl = r.f64();
  const dw: number[] = [];
  for (let c = 0; c < rank; c++) dw.push(r.f64());
  const ql = r.ints(m * rank);
  const qw = r.ints(rank * n);
  const wrow = new Float64Array(n);
  for (let c = 0; c < rank; c++) {
    for (let j = 0; j < n; j++) wrow[j] = qw[c * n + j] * dw[c];
    for (let i = 0; i < m; i++) {
      const l = ql[i * rank + c] * dl;
      if (l === 0) continue;
      const o = i * n;
      for (let j = 0; j < n; j++) acc[o + j] += l * wrow[j];
    }
  }
  return acc;
}

function decodeGlobal(bytes: Uint8Array): Float32Array {
  const r = new Reader(bytes);
  const m = r.u32();
  const n = r.u32();
  const centre = r.f64();
  const restore = readMissing(r, m * n);
  const acc = readFactors(r, m, n, centre);
  if (r.u8() === 1) {
    const step = r.f64();
    const predicted = r.u8() === 1;
    const d = r.ints(m * n);
    const q = predicted ? lorenzoPredictor.inverse(d, m, n) : d;
    for (let i = 0; i < acc.length; i++) acc[i] += q[i] * step;
  }
  r.end();
  const out = Float32Array.from(acc);
  restore(out);
  return out;
}

export const globalSvd: Codec = {
  id: 'global-svd',
  describe: 'one truncated SVD of the whole mean-removed field (no tiles), factors quantized like rankfield\'s; pointwise bounds add a residual quantized with step 2E (plain or Lorenzo, the smaller).',
  skip: (f) => svdSkip(f.rows, f.cols),
  encode(field, target) {
    const { rows: m, cols: n } = field;
    const p = prepare(field.values, field.fill);
    let centre = 0;
    for (let i = 0; i < p.filled.length; i++) centre += p.filled[i];
    centre /= p.filled.length;
    const a = new Float64Array(p.filled.length);
    for (let i = 0; i < a.length; i++) a[i] = p.filled[i] - centre;
    const d = svd(a, m, n);
    const head = (w: Writer): void => {
      w.u32(m);
      w.u32(n);
      w.f64(centre);
      writeMissing(w, field.values, p);
    };
    const tail = new Float64Array(d.k + 1); // tail[r] = sum_{c>=r} s_c^2
    for (let c = d.k - 1; c >= 0; c--) tail[c] = tail[c + 1] + d.s[c] * d.s[c];
    let best: Uint8Array | null = null;
    let worse = 0;
    const consider = (bytes: Uint8Array): boolean => {
      if (best === null || bytes.length < best.length) {
        best = bytes;
        worse = 0;
      } else worse++;
      return worse >= 2;
    };
    if (!target.pointwise) {
      const budget = p.valid * target.tol * target.tol;
      let r0 = 0;
      while (r0 < d.k && tail[r0] > 0.9 * budget) r0++;
      for (let r = r0; r <= Math.min(d.k, r0 + 6); r++) {
        const sse = 0.95 * budget - tail[r];
        if (!(sse > 0)) continue;
        const make = (scale: number): Uint8Array => {
          const w = new Writer();
          head(w);
          factorBlock(w, d, r, sse * scale * scale);
          w.u8(0);
          return w.finish();
        };
        if (consider(shrinkUntilMet(make, decodeGlobal, field, target))) break;
      }
      if (best === null) throw new Error('global SVD found no rank within the budget');
      return best;
    }
    const step = 2 * pointwiseBudget(target.tol, p.amax);
    const ranks = [0, 1, 2, 3, 4, 6, 8, 12, 16, 24, 32, 48, 64, 96, 128, 192, 256, 384, 512, 768, 1024].filter((r) => r <= d.k);
    for (const r of ranks) {
      const fw = new Writer();
      factorBlock(fw, d, r, p.valid * (step / 6) ** 2);
      const block = fw.finish();
      // The decoder's own routine, so the residual is taken against exactly what it will rebuild.
      const acc = readFactors(new Reader(block), m, n, centre);
      const q = new Int32Array(m * n);
      for (let c = 0; c < q.length; c++) q[c] = Math.round((p.filled[c] - acc[c]) / step);
      for (const c of p.missing) q[c] = 0;
      const plain = packInts(q);
      const predicted = packInts(lorenzoPredictor.forward(q, m, n));
      const w = new Writer();
      head(w);
      w.bytes(block);
      w.u8(1);
      w.f64(step);
      const usePrediction = deflatedSize(predicted) < deflatedSize(plain);
      w.u8(usePrediction ? 1 : 0);
      w.section(usePrediction ? predicted : plain);
      if (consider(w.finish())) break;
    }
    if (best === null) throw new Error('global SVD tried no rank');
    return best;
  },
  decode: decodeGlobal,
};
