/**
 * What the residual search's walks in kernels/rdo.ts and kernels/rdo-blend.ts
 * share: a cell's value, Math.round of the JavaScript, the rough bits
 * of a difference (src/codec/rdo.ts, diffBits), and the choice of a valid
 * cell's code.
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


/** The rough bits of the code {@link settleCode} chose last (a second result, so that the walks need not look them up again). */
export let settledBits: f64 = 0;

/**
 * The code a walk settles at a valid cell (RdoWalk.run in src/codec/rdo.ts):
 * the nearest code `nearF` (Math.round of the scaled value x, within LIMIT
 * + 1), or the next one towards the prediction p when its squared error
 * plus w times its rough bits is smaller; its rough bits in
 * {@link settledBits}. The code and p are integers held in i64 (exactly
 * the JavaScript's binary64 values).
 */
@inline
export function settleCode(table: usize, x: f64, nearF: f64, p: i64, w: f64): i64 {
  const v: i64 = <i64>nearF;
  const dv: i64 = v - p;
  const bitsNear = bitsOf(table, dv);
  settledBits = bitsNear;
  if (dv === 0) return v;
  const altF = nearF + (<f64>p > nearF ? 1 : -1);
  const bitsAlt = bitsOf(table, v + (p > v ? 1 : -1) - p);
  if ((x - altF) * (x - altF) + w * bitsAlt < (x - nearF) * (x - nearF) + w * bitsNear) {
    settledBits = bitsAlt;
    return v + (p > v ? 1 : -1);
  }
  return v;
}

/** src/codec/reconstruct.ts interior() for the plain predictors (Lorenzo 1 to the median 5) of a (left), b (up), u (up-left). */
@inline
export function interior(kind: i32, a: i64, b: i64, u: i64): i64 {
  if (kind === 1) return a + b - u;
  if (kind === 2) return a;
  if (kind === 3) return b;
  if (kind === 4) return (a + b) >> 1;
  const lo = a < b ? a : b;
  const hi = a < b ? b : a;
  return u >= hi ? lo : u <= lo ? hi : a + b - u;
}
