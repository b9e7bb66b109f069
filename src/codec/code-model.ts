/**
 * The adaptive model shared by the integer-code encoder and decoder
 * (spec/FORMAT.md, "Coded integer streams"). Both sides run exactly this
 * code, so their probabilities agree bit for bit.
 *
 * An integer stream is an m x n grid of signed integers (|v| <= 2^30) coded
 * in raster order. Each value is binarised as: a zero flag; a sign; the
 * bit length class k of |v| (|v| in [2^k, 2^(k+1))) in unary; then the k
 * bits below the leading one, the top two with adaptive probabilities and
 * the rest at probability 1/2. The zero flag and the unary classes are
 * conditioned on a bucket of the magnitudes of the already coded
 * neighbours (left, up, up-left, up-right), which is where the gain over
 * byte-oriented coding comes from: the local activity predicts the size of
 * the next code.
 */

/** Probabilities are of a 0 bit, in units of 2^-16, kept in [1, 65535]. */
export const PROB_BITS = 16;
export const PROB_ONE = 1 << PROB_BITS;
export const PROB_HALF = PROB_ONE >>> 1;

/** Number of neighbourhood buckets (bit lengths 0..15 of the activity). */
export const BUCKETS = 16;
/** Unary class positions: k is at most 30 for |v| <= 2^30. */
export const CLASSES = 31;
/** Sign contexts: signs (-, 0, +) of the left and up codes. */
export const SIGN_CONTEXTS = 9;
/** Largest adaptation shift: probabilities move by 1/2^shift of the gap. */
export const MAX_SHIFT = 5;

/**
 * Offsets of the context groups in one model array.
 * zero[b], sign[s], class[b][i], mantissa[k][0..2] (top bit; second bit given the top bit).
 */
export const ZERO_AT = 0;
export const SIGN_AT = ZERO_AT + BUCKETS;
export const CLASS_AT = SIGN_AT + SIGN_CONTEXTS;
export const MANT_AT = CLASS_AT + BUCKETS * CLASSES;
export const CONTEXTS = MANT_AT + CLASSES * 3;

/**
 * Adaptation shift after `count` updates of a context: 1, 2, 2, 3, 3, 3, 3,
 * 4 (x8), then MAX_SHIFT: an average over the bits seen so far while a
 * context is young, an exponential forgetting once it has history.
 */
export const SHIFTS: Uint8Array = /* @__PURE__ */ (() => {
  const t = new Uint8Array(256);
  for (let c = 0; c < 256; c++) t[c] = Math.min(MAX_SHIFT, 32 - Math.clz32(c + 1));
  return t;
})();

/** A fresh model: every probability 1/2, every count 0. */
export function newModel(): { p: Uint16Array; count: Uint8Array } {
  return { p: new Uint16Array(CONTEXTS).fill(PROB_HALF), count: new Uint8Array(CONTEXTS) };
}

/** Neighbourhood bucket: bit length of 2|left| + 2|up| + |up-left| + |up-right|, capped. */
export function bucketOf(left: number, up: number, upLeft: number, upRight: number): number {
  const a = 2 * (left < 0 ? -left : left) + 2 * (up < 0 ? -up : up) + (upLeft < 0 ? -upLeft : upLeft) + (upRight < 0 ? -upRight : upRight);
  const bits = 32 - Math.clz32(a > 0x7fff ? 0x7fff : a);
  return bits;
}

/** Sign context from the left and up codes. */
export function signContext(left: number, up: number): number {
  return 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1);
}

/**
 * The model of a coded class map (the mask of a tile): per cell, whether it
 * is missing, in one of 16 contexts from the left, up, up-left and up-right
 * cells being missing; then, for a missing cell, its class minus 1 (0..4) as
 * three bits of a binary tree (7 nodes) in one of 6 contexts, the class of
 * the cell above.
 */
export const MASK_SPECIAL_AT = 0;
export const MASK_CLASS_AT = 16;
export const MASK_CONTEXTS = MASK_CLASS_AT + 6 * 7;

/** A fresh class-map model: every probability 1/2, every count 0. */
export function newMaskModel(): { p: Uint16Array; count: Uint8Array } {
  return { p: new Uint16Array(MASK_CONTEXTS).fill(PROB_HALF), count: new Uint8Array(MASK_CONTEXTS) };
}
