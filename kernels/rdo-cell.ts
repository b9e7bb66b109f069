/**
 * What the residual search's walks in kernels/rdo.ts and kernels/rdo-blend.ts
 * share: a cell's value, Math.round of the JavaScript, and the rough bits
 * of a difference (src/codec/rdo.ts, diffBits).
 */

/** Math.log2 of the JavaScript that loads the module (the rough bits of a difference of TABLE or more: the same function, so the same value). */
@external('env', 'log2')
declare function jsLog2(x: f64): f64;

/** The codes' limit (src/codec/section.ts, MAX_INT). */
export const LIMIT: f64 = 1073741824;
/** Differences whose rough bits are in the table (src/codec/rdo.ts, DIFF_TABLE). */
export const TABLE: i64 = 4096;

/** Math.round of the JavaScript: the integer nearest x, halves up (x - floor(x) is exact; infinities and NaN as they are; -0 for [-0.5, 0) becomes +0, which no caller can tell apart). */
@inline
export function roundJs(x: f64): f64 {
  const r = Math.floor(x);
  return select<f64>(r + 1, r, x - r >= 0.5);
}

/** LIMIT as an integer. */
export const LIMIT_I: i64 = 1073741824;

/** src/codec/rdo.ts diffBits of an integer difference: 1 for 0, else 3 + 2 log2 |d| (looked up below TABLE). */
@inline
export function bitsOf(table: usize, d: i64): f64 {
  const a = d < 0 ? -d : d;
  return a < TABLE ? load<f64>(table + (<usize>a << 3)) : 3 + 2 * jsLog2(<f64>a);
}

@inline
export function value(orig: usize, f32: i32, c: i32): f64 {
  return f32 !== 0 ? <f64>load<f32>(orig + (<usize>c << 2)) : load<f64>(orig + (<usize>c << 3));
}

