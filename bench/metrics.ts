/**
 * Error measurement shared by the harness and by the baselines' own search
 * loops: max error, RMSE and PSNR over the valid cells, and a bit-for-bit
 * comparison of the missing ones (NaN, infinities, the fill value).
 */
import type { BoundMode } from '../src/types.js';

/** A field as every method sees it: float32, row-major, optional fill value. */
export interface FieldData {
  values: Float32Array;
  rows: number;
  cols: number;
  fill: number | null;
  /**
   * For a time x space stack (one snapshot per row): the snapshot's grid
   * [gridRows, gridCols], with gridRows x gridCols = cols.
   */
  stack?: readonly [number, number];
}

/** A bound resolved against a field. */
export interface Target {
  /** As written in the tables, e.g. 'rel:1e-3'. */
  text: string;
  mode: BoundMode;
  value: number;
  /** Absolute tolerance: the pointwise limit E (abs, rel) or the RMSE limit (rmse, psnr). */
  tol: number;
  pointwise: boolean;
  /** max - min of the valid values. */
  range: number;
}

/** What a decoded field achieved against the original. */
export interface Errors {
  maxErr: number;
  rmse: number;
  /** 20 log10(range / RMSE) dB; Infinity when exact. */
  psnr: number;
  valid: number;
  /** Missing cells whose bits differ, plus valid cells that decoded to a non-finite value. */
  mismatches: number;
}

/** True for a cell that is not a valid value: non-finite, or bitwise the fill value. */
export function isMissing(v: number, fill32: number | null): boolean {
  return !Number.isFinite(v) || (fill32 !== null && v === fill32);
}

/** Min and max of the valid values ([0, 0] when none). */
export function validRange(values: Float32Array, fill: number | null): [number, number] {
  const f = fill === null ? null : Math.fround(fill);
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (isMissing(v, f)) continue;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  return lo <= hi ? [lo, hi] : [0, 0];
}

/** Compare decoded values with the original. */
export function measure(orig: Float32Array, dec: Float32Array, fill: number | null, range: number): Errors {
  if (dec.length !== orig.length) throw new Error(`decoded ${dec.length} values, the original has ${orig.length}`);
  const f = fill === null ? null : Math.fround(fill);
  const ow = new Uint32Array(orig.buffer, orig.byteOffset, orig.length);
  const dw = new Uint32Array(dec.buffer, dec.byteOffset, dec.length);
  let max = 0;
  let sum = 0;
  let valid = 0;
  let mismatches = 0;
  for (let i = 0; i < orig.length; i++) {
    const x = orig[i];
    if (isMissing(x, f)) {
      if (ow[i] !== dw[i]) mismatches++;
      continue;
    }
    const d = dec[i];
    if (!Number.isFinite(d)) {
      mismatches++;
      continue;
    }
    const e = Math.abs(x - d);
    if (e > max) max = e;
    sum += e * e;
    valid++;
  }
  const rmse = valid > 0 ? Math.sqrt(sum / valid) : 0;
  return { maxErr: max, rmse, psnr: rmse > 0 ? 20 * Math.log10(range / rmse) : Infinity, valid, mismatches };
}

/** True when decoded values meet the bound and every missing cell came back bit for bit. */
export function meets(e: Errors, t: Target): boolean {
  if (e.mismatches > 0) return false;
  return t.pointwise ? e.maxErr <= t.tol : e.rmse <= t.tol;
}
