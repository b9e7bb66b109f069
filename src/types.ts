/** Shared public types. */

/** Element type of a field: IEEE 754 binary32 or binary64. */
export type Dtype = 'f32' | 'f64';

/** Typed array for a dtype. */
export type FloatArray = Float32Array | Float64Array;

/** How the error of decoded values is bounded. */
export type BoundMode = 'abs' | 'rel' | 'rmse' | 'psnr';

/** An error bound as the user states it, e.g. `{ mode: 'rel', value: 1e-3 }`. */
export interface Bound {
  mode: BoundMode;
  value: number;
}
