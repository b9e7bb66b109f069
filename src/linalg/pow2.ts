/**
 * Exact power-of-two scaling, used to keep squares and products of matrix
 * entries inside the float64 range without changing any significand bits.
 */

/**
 * Returns an integer e such that `x * 2^-e` lies in about [0.7, 1.4] for a
 * finite x > 0 (subnormals included). Only an approximation of the binary
 * exponent; callers need the scaled value to be O(1), not normalized.
 */
export function exponentOf(x: number): number {
  return Math.round(Math.log2(x));
}

/** Powers of two 2^k for |k| <= POW2_REACH, by k + POW2_REACH: each as `2 ** k` gives it (exact), looked up rather than computed. */
const POW2_REACH = 1100;
const POW2 = Float64Array.from({ length: 2 * POW2_REACH + 1 }, (_v, i) => 2 ** (i - POW2_REACH));

/** 2^k for an integer k: from the table within its reach, else as `2 ** k` (the same value). */
function pow2(k: number): number {
  return k >= -POW2_REACH && k <= POW2_REACH ? POW2[k + POW2_REACH] : 2 ** k;
}

/**
 * Multiplies every entry of `dst` by 2^e (|e| <= 2200) using three factors of
 * the same sign, so no factor overflows, no 0 * Infinity can occur, and the
 * result is exact unless it leaves the normal range. `dst` may be `src`.
 */
export function scaleByPow2(src: Float64Array, dst: Float64Array, e: number): void {
  const e1 = Math.trunc(e / 3);
  const e2 = Math.trunc((e - e1) / 2);
  const f1 = pow2(e1);
  const f2 = pow2(e2);
  const f3 = pow2(e - e1 - e2);
  const len = src.length;
  for (let i = 0; i < len; i++) dst[i] = src[i] * f1 * f2 * f3;
}

/** Returns x * 2^e, computed as in {@link scaleByPow2} (|e| <= 2200). */
export function mulPow2(x: number, e: number): number {
  const e1 = Math.trunc(e / 3);
  const e2 = Math.trunc((e - e1) / 2);
  return x * pow2(e1) * pow2(e2) * pow2(e - e1 - e2);
}

/** Largest |x| over the entries, or NaN when some entry is not finite (NaN or an infinity). */
export function maxAbs(a: Float64Array): number {
  let amax = 0;
  let probe = 0; // becomes NaN iff some entry is not finite
  for (let i = 0; i < a.length; i++) {
    const x = a[i];
    probe += x * 0;
    const ax = Math.abs(x);
    if (ax > amax) amax = ax;
  }
  return probe === 0 ? amax : NaN;
}
