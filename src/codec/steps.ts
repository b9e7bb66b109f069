/**
 * Quantization steps are stored as a signed 16-bit code c and mean
 * (8 + (c & 7)) * 2^((c >> 3) - 3): a 4-bit mantissa and a power of two, so a
 * step is exact in float64 and an integer times a step is exact too.
 */
import { FormatCode, FormatError } from '../errors.js';

/** Smallest and largest allowed exponent field (c >> 3). */
const MIN_EXP = -1000;
const MAX_EXP = 1000;

/** 2^e, exactly, for integer e in [-1074, 1023]. */
export function pow2(e: number): number {
  // Built from the bit pattern so no Math.pow rounding can differ between engines.
  const view = new DataView(new ArrayBuffer(8));
  if (e >= -1022) {
    view.setUint32(0, (e + 1023) << 20, false);
    view.setUint32(4, 0, false);
    return view.getFloat64(0, false);
  }
  // Subnormal range: 2^e = 2^(e + 600) * 2^-600, both exact.
  return pow2(e + 600) * pow2(-600);
}

/** The step a code stands for; refuses codes outside the allowed range. */
export function stepValue(code: number, where = 'step'): number {
  const exp = code >> 3;
  if (exp < MIN_EXP || exp > MAX_EXP) {
    throw new FormatError(FormatCode.Malformed, `${where}: step code ${code} is out of range`);
  }
  return (8 + (code & 7)) * pow2(exp - 3);
}

/** Smallest representable step: 8 x 2^(MIN_EXP - 3). */
export const MIN_STEP = 8 * pow2(MIN_EXP - 3);

/**
 * The code of the largest representable step not above `target` (>= MIN_STEP).
 * The RangeErrors below are internal assertions: the one caller,
 * quantizeFactors (tile-encode.ts), passes only finite targets >= MIN_STEP,
 * so no input to pack() reaches them.
 */
export function stepCode(target: number): number {
  if (!(target > 0)) throw new RangeError('step target must be positive');
  let exp = Math.floor(Math.log2(target));
  exp = Math.max(MIN_EXP, Math.min(MAX_EXP, exp));
  // target / 2^exp is in [1, 2): mantissa index f = floor(8 * (ratio - 1)).
  let f = Math.floor(8 * (target / pow2(exp) - 1));
  f = Math.max(0, Math.min(7, f));
  let code = exp * 8 + f;
  // Guard against log2 rounding: step down until the step is not above target.
  while (stepValue(code) > target && code > MIN_EXP * 8) code--;
  if (stepValue(code) > target) throw new RangeError(`no step code is at or below ${target}`);
  return code;
}

/**
 * The largest binary32 value not above `x`, for a positive finite `x` in
 * binary32's normal range; `x` itself otherwise (stored as binary64 then).
 * Residual steps are rounded down to it, so a payload stores them in 4
 * bytes and a smaller step never loosens a bound.
 */
export function binary32Below(x: number): number {
  if (!(x >= 2 ** -126 && x < 2 ** 128)) return x;
  const f = new Float32Array([x]);
  if (f[0] > x) new Uint32Array(f.buffer)[0]--;
  return f[0];
}

/** The binary32 value nearest `x` when `x` is within binary32's normal range (or 0); `x` itself otherwise. */
export function binary32Near(x: number): number {
  const y = Math.fround(x);
  return y === 0 ? (x === 0 ? 0 : x) : Math.abs(y) >= 2 ** -126 && Number.isFinite(y) ? y : x;
}
