/**
 * The encoder's module for tiles with missing cells (entry file): the
 * harmonic fill's sweeps (kernels/fill.ts, exported below), and here the
 * pointwise check's choice of predictor (src/codec/tile-encode.ts,
 * correct): for each plain
 * predictor (Lorenzo, Left, Up, Average, Median: 1 to 5), the rough bits
 * of roughBits(predict(predictedFill(q, codes, ...), ...)) (src/codec/
 * reconstruct.ts), in one walk a predictor that fills the missing cells
 * and forms the differences together, without writing the differences:
 * a missing cell takes its prediction from the cells filled before it
 * (0 beyond the limit), every cell's difference is its code less its
 * prediction (the edge rule on the first row and column), and the rough
 * bits are the sum of 32 - clz32 |d|; -1 where a difference passes the
 * limit (predict() gives null). Integers throughout, in i64: the same
 * values as the JavaScript's binary64 (all below 2^53). Encoder-side only;
 * compiled by `npm run kernels` (scripts/kernels.mjs) into
 * src/wasm/kernels-bytes.ts, laid out by src/wasm/masked.ts (and the fill
 * by src/wasm/fill.ts).
 *
 * Memory (byte addresses): q (m x n i32 codes), codes (m x n class codes,
 * u8: 0 is Valid), work (m x n i32 scratch: the filled codes), out (five
 * binary64, the rough bits of predictors 1 to 5).
 */

export { fillSweeps } from './fill';

/** The codes' limit (src/codec/section.ts, MAX_INT). */
const LIMIT: i64 = 1073741824;

@inline
function ld(p: usize, c: i32): i64 {
  return <i64>load<i32>(p + (<usize>c << 2));
}

/**
 * The rough bits of predictor `kind`'s differences of the filled codes, or
 * -1 (see the module's comment). Inlined into maskedBits once for each
 * kind, a constant there, so that each copy's loop holds its own
 * predictor's arithmetic and no test of the kind.
 */
@inline
function kindBits(q: usize, codes: usize, work: usize, m: i32, n: i32, kind: i32): f64 {
  let bits: i64 = 0;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    // The left and up-left neighbours' filled codes carried along the row in locals (the cells written just
    // before), the one above read from the row above; the first row and column take the edge rule.
    let left: i64 = 0;
    let upLeft: i64 = 0;
    for (let j = 0; j < n; j++) {
      const c = row + j;
      let p: i64 = 0;
      if (i === 0) p = j === 0 ? 0 : left;
      else {
        const b = ld(work, c - n);
        if (j === 0) p = b;
        else {
          const a = left;
          const u = upLeft;
          if (kind === 1) p = a + b - u;
          else if (kind === 2) p = a;
          else if (kind === 3) p = b;
          else if (kind === 4) p = (a + b) >> 1;
          else {
            const lo = a < b ? a : b;
            const hi = a < b ? b : a;
            p = u >= hi ? lo : u <= lo ? hi : a + b - u;
          }
        }
        upLeft = b;
      }
      let v: i64;
      if (load<u8>(codes + <usize>c) !== 0) v = p > LIMIT || p < -LIMIT ? 0 : p;
      else v = ld(q, c);
      store<i32>(work + (<usize>c << 2), <i32>v);
      left = v;
      const d = v - p;
      if (d > LIMIT || d < -LIMIT) return -1;
      bits += 64 - i64.clz(d < 0 ? -d : d);
    }
  }
  return <f64>bits;
}

export function maskedBits(q: usize, codes: usize, work: usize, m: i32, n: i32, out: usize): void {
  store<f64>(out, kindBits(q, codes, work, m, n, 1));
  store<f64>(out + 8, kindBits(q, codes, work, m, n, 2));
  store<f64>(out + 16, kindBits(q, codes, work, m, n, 3));
  store<f64>(out + 24, kindBits(q, codes, work, m, n, 4));
  store<f64>(out + 32, kindBits(q, codes, work, m, n, 5));
}
