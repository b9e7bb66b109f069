/**
 * Exact power-of-two scaling, used to keep squares and products of matrix
 * entries inside the float64 range without changing any significand bits.
 */

/**
 * Returns an integer e such that `x * 2^-e` lies in about [0.5, 2) for a
 * finite x > 0 (subnormals included). Only an approximation of the binary
 * exponent; callers need the scaled value to be O(1), not exactly normalized.
 */
export function exponentOf(x: number): number {
  return Math.round(Math.log2(x));
}

/**
 * Multiplies every entry of `dst` by 2^e (|e| <= 2200) in two exact steps, so
 * that the factor itself never overflows or underflows. `dst` may be `src`.
 */
export function scaleByPow2(src: Float64Array, dst: Float64Array, e: number): void {
  const h = Math.trunc(e / 2);
  const f1 = 2 ** h;
  const f2 = 2 ** (e - h);
  const len = src.length;
  for (let i = 0; i < len; i++) dst[i] = src[i] * f1 * f2;
}

/** Returns x * 2^e computed in two exact steps (|e| <= 2200). */
export function mulPow2(x: number, e: number): number {
  const h = Math.trunc(e / 2);
  return x * 2 ** h * 2 ** (e - h);
}
