/**
 * Decoder of coded integer streams (spec/FORMAT.md, "Coded integer
 * streams"): the inverse of ./code-encode.ts, with the model of
 * ./code-model.ts. The state lives in local variables of one function so
 * the inner loop stays in registers.
 */
import { Cell } from './mask.js';
import { CLASS_AT, CLASSES, MANT_AT, newModel, PROB_BITS, PROB_ONE, SHIFTS, SIGN_AT, ZERO_AT } from './code-model.js';

const TOP = 0x1000000;

/** Why a stream failed to decode, for the caller's message. */
export class CodeStreamError extends Error {}

/**
 * Decode an m x n grid of integers from `bytes` into `out` (length m x n).
 * Cells whose class in `codes` is not Valid are not in the stream and are
 * set to 0. Throws {@link CodeStreamError} if the stream is not exactly
 * `bytes.length` long or a value leaves +-2^30.
 */
export function decodeInts(bytes: Uint8Array, m: number, n: number, codes: Uint8Array | null, out: Int32Array): void {
  const { p, count } = newModel();
  const end = bytes.length;
  if (end < 4) throw new CodeStreamError(`a coded stream is at least 4 bytes, this one ${end}`);
  let pos = 4;
  let code = ((bytes[0] << 24) | (bytes[1] << 16) | (bytes[2] << 8) | bytes[3]) >>> 0;
  let range = 0xffffffff;
  let over = 0; // bytes read past the end (as zeros); the stream is refused if any

  // One adaptive binary decision; updates the model like the encoder.
  const bit = (ctx: number): number => {
    const pr = p[ctx];
    const bound = (range >>> PROB_BITS) * pr;
    const shift = SHIFTS[count[ctx]];
    if (count[ctx] < 255) count[ctx]++;
    let b: number;
    if (code < bound) {
      range = bound;
      p[ctx] = pr + ((PROB_ONE - pr) >> shift);
      b = 0;
    } else {
      code -= bound;
      range -= bound;
      p[ctx] = pr - (pr >> shift);
      b = 1;
    }
    while (range < TOP) {
      range = (range * 256) >>> 0;
      let next = 0;
      if (pos < end) next = bytes[pos];
      else over++;
      pos++;
      code = ((code * 256) >>> 0) + next;
    }
    return b;
  };

  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      if (codes !== null && codes[c] !== Cell.Valid) {
        out[c] = 0;
        continue;
      }
      const left = j > 0 ? out[c - 1] : 0;
      const up = i > 0 ? out[c - n] : 0;
      const upLeft = i > 0 && j > 0 ? out[c - n - 1] : 0;
      const upRight = i > 0 && j + 1 < n ? out[c - n + 1] : 0;
      const a = 2 * (left < 0 ? -left : left) + 2 * (up < 0 ? -up : up) + (upLeft < 0 ? -upLeft : upLeft) + (upRight < 0 ? -upRight : upRight);
      const bucket = 32 - Math.clz32(a > 0x7fff ? 0x7fff : a);
      if (bit(ZERO_AT + bucket) === 0) {
        out[c] = 0;
        continue;
      }
      const sctx = 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1);
      const negative = bit(SIGN_AT + sctx);
      const cls = CLASS_AT + bucket * CLASSES;
      let k = 0;
      while (k < 30 && bit(cls + k) === 1) k++;
      let mag = 1;
      if (k > 0) {
        const top = bit(MANT_AT + 3 * k);
        mag = 2 + top;
        if (k > 1) {
          mag = 2 * mag + bit(MANT_AT + 3 * k + 1 + top);
          // The remaining k - 2 bits at probability 1/2.
          for (let b = k - 3; b >= 0; b--) {
            range = range >>> 1;
            let d = 0;
            if (code >= range) {
              code -= range;
              d = 1;
            }
            mag = 2 * mag + d;
            while (range < TOP) {
              range = (range * 256) >>> 0;
              let next = 0;
              if (pos < end) next = bytes[pos];
              else over++;
              pos++;
              code = ((code * 256) >>> 0) + next;
            }
          }
        }
      }
      if (mag > 0x40000000) throw new CodeStreamError(`value ${c} exceeds 2^30 in magnitude`);
      out[c] = negative ? -mag : mag;
    }
  }
  if (over > 0) throw new CodeStreamError(`the stream ends ${over} byte(s) before its values do`);
  if (pos !== end) throw new CodeStreamError(`${end - pos} byte(s) follow the end of the stream`);
}
