/**
 * Baseline 2: uniform scalar quantization, then DEFLATE. For a pointwise
 * bound E the step is 2E (less one float32 ulp, so the final rounding cannot
 * break the bound) and every value is within half a step; for an RMSE bound
 * the step is sqrt(12) times the RMSE limit (uniform rounding error has RMSE
 * step / sqrt(12), from memory), shrunk until the decoded field meets it.
 * The integers are zigzagged into byte planes, the same packing rankfield
 * uses, so that the comparison is about modelling, not about packing.
 */
import { BaselineFailure, MAX_INT, Reader, Writer } from './bytes.js';
import { pointwiseBudget, shrinkUntilMet, type Codec } from './codec.js';
import { prepare, readMissing, writeMissing, type Prepared } from './missing.js';
import type { FieldData, Target } from '../metrics.js';

/** round((x - centre) / step) for every cell. */
export function quantizeAll(x: Float64Array, centre: number, step: number): Int32Array {
  const q = new Int32Array(x.length);
  for (let i = 0; i < x.length; i++) {
    const v = Math.round((x[i] - centre) / step);
    // 2^28 keeps Lorenzo-predicted integers (at most 4x larger) within the packers' 2^30.
    if (!(Math.abs(v) <= MAX_INT / 4)) throw new BaselineFailure(`step ${step} is too small for this field (quantized values beyond 2^28)`);
    q[i] = v;
  }
  return q;
}

/** The quantization step of a pointwise bound. */
export function pointwiseStep(target: Target, p: Prepared): number {
  return 2 * pointwiseBudget(target.tol, p.amax);
}

/** A reversible integer transform applied to the quantized grid before packing (a predictor). */
export interface Predictor {
  forward(q: Int32Array, rows: number, cols: number): Int32Array;
  inverse(d: Int32Array, rows: number, cols: number): Int32Array;
}

/** Header, missing cells, then the (optionally predicted) integers. */
export function encodeQuantized(field: FieldData, target: Target, predictor: Predictor | null = null): Uint8Array {
  const predict = predictor !== null;
  const p = prepare(field.values, field.fill);
  const centre = (p.lo + p.hi) / 2;
  const make = (step: number): Uint8Array => {
    const q = quantizeAll(p.filled, centre, step);
    const w = new Writer();
    w.u32(field.rows);
    w.u32(field.cols);
    w.f64(centre);
    w.f64(step);
    w.u8(predict ? 1 : 0);
    writeMissing(w, field.values, p);
    w.ints(predictor ? predictor.forward(q, field.rows, field.cols) : q);
    return w.finish();
  };
  if (target.pointwise) return make(pointwiseStep(target, p));
  return shrinkUntilMet((s) => make(Math.sqrt(12) * target.tol * s), (b) => decodeQuantized(b, predictor), field, target);
}

/** Inverse of {@link encodeQuantized}; a predicted stream needs the same predictor. */
export function decodeQuantized(bytes: Uint8Array, predictor: Predictor | null = null): Float32Array {
  const r = new Reader(bytes);
  const rows = r.u32();
  const cols = r.u32();
  const centre = r.f64();
  const step = r.f64();
  const predict = r.u8() === 1;
  const out = new Float32Array(rows * cols);
  const missing = readMissing(r, rows * cols);
  const d = r.ints(rows * cols);
  r.end();
  if (predict && !predictor) throw new Error('quantize baseline: stream is predicted but no predictor was given');
  const q = predict && predictor ? predictor.inverse(d, rows, cols) : d;
  for (let i = 0; i < q.length; i++) out[i] = centre + q[i] * step;
  missing(out);
  return out;
}

export const quantize: Codec = {
  id: 'quantize',
  describe: 'uniform scalar quantization (step 2E for pointwise bounds, sqrt(12) x RMSE limit otherwise), zigzag byte planes, DEFLATE level 9.',
  encode: (field, target) => encodeQuantized(field, target),
  decode: (bytes) => decodeQuantized(bytes),
};
