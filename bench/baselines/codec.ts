/** What every baseline implements, so that the harness encodes, decodes and checks each the same way. */
import { measure, meets, type FieldData, type Target } from '../metrics.js';
import { BaselineFailure } from './bytes.js';

export interface Codec {
  /** Short name used in tables, plots and file names. */
  id: string;
  /** One line for RESULTS.md: what the method stores. */
  describe: string;
  /** Whether the method applies to this field at all (default: yes); fields it does not apply to get no row. */
  appliesTo?(field: FieldData): boolean;
  /** A reason to skip this (field, bound) cell, or null to run it. */
  skip?(field: FieldData, target: Target): string | null;
  /** Compress; may throw BaselineFailure when the bound cannot be met. */
  encode(field: FieldData, target: Target): Uint8Array;
  /** Decompress from the bytes alone. */
  decode(bytes: Uint8Array): Float32Array | Promise<Float32Array>;
}

/**
 * For RMSE-type bounds: encode with a step scale of 1, decode, measure, and
 * shrink the scale by 5% until the decoded field meets the bound (the step
 * formulas assume uniformly spread rounding errors, which integer-valued or
 * strongly clustered data need not have).
 */
export function shrinkUntilMet(make: (scale: number) => Uint8Array, decode: (b: Uint8Array) => Float32Array, field: FieldData, target: Target): Uint8Array {
  let scale = 1;
  for (let attempt = 0; attempt < 40; attempt++, scale *= 0.95) {
    const bytes = make(scale);
    if (meets(measure(field.values, decode(bytes), field.fill, target.range), target)) return bytes;
  }
  throw new BaselineFailure('no step found that meets the bound');
}

/**
 * Largest pointwise error a quantizer may leave before the final rounding to
 * float32, so that |x - float32(x')| <= tol still holds: tol minus one to two
 * float32 ulps at the largest magnitude (rounding to float32 moves a value by
 * at most half an ulp; common practice, no source).
 */
export function pointwiseBudget(tol: number, amax: number): number {
  const ulp = 2 ** (Math.ceil(Math.log2(amax + tol + Number.MIN_VALUE)) - 23);
  const budget = tol - ulp;
  if (!(budget > 0)) throw new BaselineFailure(`the bound ${tol} is below float32 resolution at magnitude ${amax}`);
  return budget;
}
