/**
 * Decoder of coded integer streams (spec/FORMAT.md, "Coded integer
 * streams"): the inverse of ./code-encode.ts, with the model of
 * ./code-model.ts. The state lives in local variables of one function so
 * the inner loop stays in registers; that is why each binary decision
 * (zero flag, sign, class bits, mantissa bits) is written out where it is
 * taken rather than called: a shared decision function would have to carry
 * range, code and position through an object (as RangeDecoder below does
 * for the mask's few decisions, where speed matters less).
 */
import { DECODE_KERNELS } from '../wasm/kernels-bytes.js';
import { kernels, SCRATCH_AT } from '../wasm/kernels.js';
import { Cell } from './mask.js';
import { CLASS_AT, CLASSES, CONTEXTS, MANT_AT, MASK_CLASS_AT, MASK_SPECIAL_AT, newMaskModel, newModel, PROB_BITS, PROB_ONE, SHIFTS, SIGN_AT, ZERO_AT } from './code-model.js';

const TOP = 0x1000000;

/** Why a stream failed to decode, for the caller's message. */
export class CodeStreamError extends Error {}

/** A range decoder over one stream, with the adaptive model it was coded with. */
class RangeDecoder {
  private pos = 4;
  private code: number;
  private range = 0xffffffff;
  /** Bytes read past the end (as zeros); the stream is refused if any. */
  private over = 0;

  constructor(
    private readonly bytes: Uint8Array,
    private readonly p: Uint16Array,
    private readonly count: Uint8Array,
  ) {
    if (bytes.length < 4) throw new CodeStreamError(`a coded stream is at least 4 bytes, this one ${bytes.length}`);
    this.code = ((bytes[0] << 24) | (bytes[1] << 16) | (bytes[2] << 8) | bytes[3]) >>> 0;
    // No encoder produces a start at or above the initial range (2^32 - 1).
    if (this.code >= this.range) throw new CodeStreamError('the stream starts with FF FF FF FF, which no encoder writes');
  }

  private normalize(): void {
    while (this.range < TOP) {
      this.range = (this.range * 256) >>> 0;
      let next = 0;
      if (this.pos < this.bytes.length) next = this.bytes[this.pos];
      else this.over++;
      this.pos++;
      this.code = ((this.code * 256) >>> 0) + next;
    }
  }

  /** One adaptive binary decision; updates the model as the encoder did. */
  bit(ctx: number): number {
    const pr = this.p[ctx];
    const bound = (this.range >>> PROB_BITS) * pr;
    const shift = SHIFTS[this.count[ctx]];
    if (this.count[ctx] < 255) this.count[ctx]++;
    let b = 0;
    if (this.code < bound) {
      this.range = bound;
      this.p[ctx] = pr + ((PROB_ONE - pr) >> shift);
    } else {
      this.code -= bound;
      this.range -= bound;
      this.p[ctx] = pr - (pr >> shift);
      b = 1;
    }
    if (this.range < TOP) this.normalize();
    return b;
  }

  /** One bit at probability 1/2. */
  direct(): number {
    this.range = this.range >>> 1;
    let b = 0;
    if (this.code >= this.range) {
      this.code -= this.range;
      b = 1;
      // The unit left over when an odd range is halved belongs to no bit.
      if (this.code >= this.range) throw new CodeStreamError('a direct bit falls outside both halves of the range');
    }
    if (this.range < TOP) this.normalize();
    return b;
  }

  /** Refuse a stream that ran short or has bytes after its end. */
  finish(what: string): void {
    if (this.over > 0) throw new CodeStreamError(`the stream ends ${this.over} byte(s) before its ${what} do`);
    if (this.pos !== this.bytes.length) throw new CodeStreamError(`${this.bytes.length - this.pos} byte(s) follow the end of the stream`);
  }
}

/**
 * Decode an m x n grid of integers from `bytes` into `out` (length m x n).
 * Cells whose class in `codes` is not Valid are not in the stream and are
 * set to 0. Throws {@link CodeStreamError} if the stream is not exactly
 * `bytes.length` long or a value leaves +-2^30.
 *
 * The hot loop of every read, written for speed:
 * - the decoder state lives in locals and the binary decision is written
 *   out at each use (a call per decision costs about a third of the time);
 * - range, code and bound stay unsigned 32-bit integers (`Math.imul` and
 *   `>>> 0`): (range >>> 16) x p < 2^32 and code < range < 2^24 before a
 *   shift by 8, so every result is the exact one the spec's arithmetic
 *   gives, without the conversions to and from doubles;
 * - the neighbours of a cell are carried along the row (left, up and
 *   up-left are the previous cell's left, up-right and up), so a cell reads
 *   one value of the row above, and its magnitude, once;
 * - a run of zeros in a zero neighbourhood takes one decision a cell in a
 *   loop of its own (on the large bench field's residuals, 1.6x faster).
 */
export function decodeInts(bytes: Uint8Array, m: number, n: number, codes: Uint8Array | null, out: Int32Array): void {
  // The model's layout in locals: a read of an imported binding goes through a cell in V8 (about 10% of a
  // tight loop like this one, measured on the symbol coder's decoder).
  const kZeroAt = ZERO_AT;
  const kSignAt = SIGN_AT;
  const kClassAt = CLASS_AT;
  const kClasses = CLASSES;
  const kMantAt = MANT_AT;
  const kProbBits = PROB_BITS;
  const kProbOne = PROB_ONE;
  const shifts = SHIFTS;
  const end = bytes.length;
  if (end < 4) throw new CodeStreamError(`a coded stream is at least 4 bytes, this one ${end}`);
  let code = ((bytes[0] << 24) | (bytes[1] << 16) | (bytes[2] << 8) | bytes[3]) >>> 0;
  let range = 0xffffffff;
  if (code >= range) throw new CodeStreamError('the stream starts with FF FF FF FF, which no encoder writes');
  if (decodedByKernel(bytes, code, m, n, codes, out)) return;
  // The model only here: the kernel sets up its own (two arrays less a call on a read of a small field).
  const { p, count } = newModel();
  let pos = 4;
  let ctx = 0;
  let pr = 0;
  let cnt = 0;
  let bound = 0;
  let bit = 0;
  const masked = codes !== null;
  const valid = Cell.Valid;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    // Carried neighbours and their magnitudes: left, up, up-left (0 outside the tile).
    let left = 0;
    let aLeft = 0;
    let up = i > 0 ? out[row - n] : 0;
    let aUp = up < 0 ? -up : up;
    let aUpLeft = 0;
    for (let j = 0; j < n; j++) {
      // True when a run below ended on a 1 zero flag: this cell's zero flag is decoded (bucket 0).
      let nonzero = false;
      if (!masked && (aLeft | aUp | aUpLeft) === 0) {
        // A run of zeros (most cells of a smooth field's residual): with every neighbour so far 0 the
        // bucket stays 0 while the up-right code is 0, so the cells take the same zero-flag decision,
        // its probability and count held in locals, until a 1 or a non-zero up-right code.
        let pr0 = p[kZeroAt];
        let cnt0 = count[kZeroAt];
        for (; j < n; j++) {
          const c = row + j;
          if (i > 0 && j + 1 < n && out[c - n + 1] !== 0) break;
          bound = Math.imul(range >>> kProbBits, pr0) >>> 0;
          const shift = shifts[cnt0];
          if (cnt0 < 255) cnt0++;
          if (code < bound) {
            range = bound;
            pr0 = pr0 + ((kProbOne - pr0) >> shift);
          } else {
            code = (code - bound) >>> 0;
            range = (range - bound) >>> 0;
            pr0 = pr0 - (pr0 >> shift);
            nonzero = true;
          }
          while (range < TOP) {
            range = (range << 8) >>> 0;
            code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
            pos++;
          }
          if (nonzero) break;
          out[c] = 0;
        }
        p[kZeroAt] = pr0;
        count[kZeroAt] = cnt0;
        // The carried neighbours are all still 0 here.
        if (j === n) break;
      }
      const c = row + j;
      const upRight = i > 0 && j + 1 < n ? out[c - n + 1] : 0;
      const aUpRight = upRight < 0 ? -upRight : upRight;
      if (masked && codes[c] !== valid) {
        out[c] = 0;
        left = 0;
        aLeft = 0;
        aUpLeft = aUp;
        up = upRight;
        aUp = aUpRight;
        continue;
      }
      const a = 2 * aLeft + 2 * aUp + aUpLeft + aUpRight;
      const bucket = 32 - Math.clz32(a > 0x7fff ? 0x7fff : a);
      if (nonzero) bit = 1;
      else {
        // Decision: zero flag.
        ctx = kZeroAt + bucket;
        pr = p[ctx];
        cnt = count[ctx];
        bound = Math.imul(range >>> kProbBits, pr) >>> 0;
        if (code < bound) {
          range = bound;
          p[ctx] = pr + ((kProbOne - pr) >> shifts[cnt]);
          bit = 0;
        } else {
          code = (code - bound) >>> 0;
          range = (range - bound) >>> 0;
          p[ctx] = pr - (pr >> shifts[cnt]);
          bit = 1;
        }
        if (cnt < 255) count[ctx] = cnt + 1;
        while (range < TOP) {
          range = (range << 8) >>> 0;
          code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
          pos++;
        }
      }
      let v = 0;
      if (bit !== 0) {
        // Decision: sign.
        ctx = kSignAt + 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1);
        pr = p[ctx];
        cnt = count[ctx];
        bound = Math.imul(range >>> kProbBits, pr) >>> 0;
        if (code < bound) {
          range = bound;
          p[ctx] = pr + ((kProbOne - pr) >> shifts[cnt]);
          bit = 0;
        } else {
          code = (code - bound) >>> 0;
          range = (range - bound) >>> 0;
          p[ctx] = pr - (pr >> shifts[cnt]);
          bit = 1;
        }
        if (cnt < 255) count[ctx] = cnt + 1;
        while (range < TOP) {
          range = (range << 8) >>> 0;
          code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
          pos++;
        }
        const negative = bit;
        // Decisions: the class k in unary, at most 30 ones.
        const cls = kClassAt + bucket * kClasses;
        let k = 0;
        for (;;) {
          ctx = cls + k;
          pr = p[ctx];
          cnt = count[ctx];
          bound = Math.imul(range >>> kProbBits, pr) >>> 0;
          if (code < bound) {
            range = bound;
            p[ctx] = pr + ((kProbOne - pr) >> shifts[cnt]);
            bit = 0;
          } else {
            code = (code - bound) >>> 0;
            range = (range - bound) >>> 0;
            p[ctx] = pr - (pr >> shifts[cnt]);
            bit = 1;
          }
          if (cnt < 255) count[ctx] = cnt + 1;
          while (range < TOP) {
            range = (range << 8) >>> 0;
            code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
            pos++;
          }
          if (bit === 0) break;
          k++;
          if (k === 30) break;
        }
        let mag = 1;
        // Decisions: up to two mantissa bits with contexts (the second given the first), then direct bits.
        for (let b = 0; b < k; b++) {
          if (b < 2) {
            ctx = kMantAt + 3 * k + (b === 0 ? 0 : 1 + (mag & 1));
            pr = p[ctx];
            cnt = count[ctx];
            bound = Math.imul(range >>> kProbBits, pr) >>> 0;
            if (code < bound) {
              range = bound;
              p[ctx] = pr + ((kProbOne - pr) >> shifts[cnt]);
              bit = 0;
            } else {
              code = (code - bound) >>> 0;
              range = (range - bound) >>> 0;
              p[ctx] = pr - (pr >> shifts[cnt]);
              bit = 1;
            }
            if (cnt < 255) count[ctx] = cnt + 1;
          } else {
            range = range >>> 1;
            bit = 0;
            if (code >= range) {
              code = (code - range) >>> 0;
              bit = 1;
              // The unit left over when an odd range is halved belongs to no bit.
              if (code >= range) throw new CodeStreamError('a direct bit falls outside both halves of the range');
            }
          }
          while (range < TOP) {
            range = (range << 8) >>> 0;
            code = ((code << 8) | (pos < end ? bytes[pos] : 0)) >>> 0;
            pos++;
          }
          mag = 2 * mag + bit;
        }
        if (mag > 0x40000000) throw new CodeStreamError(`value ${c} exceeds 2^30 in magnitude`);
        v = negative ? -mag : mag;
      }
      out[c] = v;
      left = v;
      aLeft = v < 0 ? -v : v;
      aUpLeft = aUp;
      up = upRight;
      aUp = aUpRight;
    }
  }
  if (pos > end) throw new CodeStreamError(`the stream ends ${pos - end} byte(s) before its values do`);
  if (pos !== end) throw new CodeStreamError(`${end - pos} byte(s) follow the end of the stream`);
}

/** The integer decoder of kernels/decode.ts (kernels/ints.ts): addresses are byte offsets into the kernels' memory. */
interface IntsKernel {
  decodeInts(bytes: number, end: number, code0: number, m: number, n: number, codes: number, out: number, model: number): number;
  finalPos: WebAssembly.Global;
  failedAt: WebAssembly.Global;
}

/**
 * {@link decodeInts} after its first four bytes (`code`, checked), in the
 * WebAssembly kernel: the same values, and the same errors at the same
 * places. False when the kernel is not to be had (the caller decodes).
 */
function decodedByKernel(bytes: Uint8Array, code: number, m: number, n: number, codes: Uint8Array | null, out: Int32Array): boolean {
  const k = kernels();
  if (k === null || CONTEXTS !== 614 || Cell.Valid !== 0) return false; // the layout the kernel is written for
  const cells = m * n;
  const end = bytes.length;
  // Bytes from SCRATCH_AT: out (i32), the model (u32 a context), the class map, the stream.
  const outAt = SCRATCH_AT;
  const modelAt = outAt + 4 * cells;
  const codesAt = modelAt + 4 * CONTEXTS;
  const bytesAt = codesAt + (codes === null ? 0 : cells);
  if (!k.lease(bytesAt + end - SCRATCH_AT)) return false;
  let status: number;
  let fn: IntsKernel | null;
  try {
    fn = k.module<IntsKernel>(DECODE_KERNELS);
    if (fn === null) return false;
    const heap = k.u8;
    if (codes !== null) heap.set(codes.subarray(0, cells), codesAt);
    heap.set(bytes, bytesAt);
    status = fn.decodeInts(bytesAt, end, code, m, n, codes === null ? 0 : codesAt, outAt, modelAt);
    out.set(k.i32.subarray(outAt / 4, outAt / 4 + cells));
  } finally {
    k.release();
  }
  if (status === 1) throw new CodeStreamError('a direct bit falls outside both halves of the range');
  if (status === 2) throw new CodeStreamError(`value ${fn.failedAt.value} exceeds 2^30 in magnitude`);
  const pos = fn.finalPos.value as number;
  if (pos > end) throw new CodeStreamError(`the stream ends ${pos - end} byte(s) before its values do`);
  if (pos !== end) throw new CodeStreamError(`${end - pos} byte(s) follow the end of the stream`);
  return true;
}

/**
 * Decode the class map of an m x n tile written by encodeClasses into `out`.
 * Classes above 5 are refused, as are streams of the wrong length.
 */
export function decodeClasses(bytes: Uint8Array, m: number, n: number, out: Uint8Array): void {
  const { p, count } = newMaskModel();
  const dec = new RangeDecoder(bytes, p, count);
  const bit = (ctx: number): number => dec.bit(ctx);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const left = j > 0 && out[c - 1] !== 0 ? 1 : 0;
      const up = i > 0 ? out[c - n] : 0;
      const upLeft = i > 0 && j > 0 && out[c - n - 1] !== 0 ? 1 : 0;
      const upRight = i > 0 && j + 1 < n && out[c - n + 1] !== 0 ? 1 : 0;
      if (bit(MASK_SPECIAL_AT + left + 2 * (up !== 0 ? 1 : 0) + 4 * upLeft + 8 * upRight) === 0) {
        out[c] = 0;
        continue;
      }
      const base = MASK_CLASS_AT + 7 * up;
      const b2 = bit(base);
      const b1 = bit(base + 1 + b2);
      const v = 4 * b2 + 2 * b1 + bit(base + 3 + 2 * b2 + b1);
      if (v > 4) throw new CodeStreamError(`cell ${c} has class ${v + 1}, above the largest, 5`);
      out[c] = v + 1;
    }
  }
  dec.finish('classes');
}
