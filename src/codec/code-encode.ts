/**
 * Encoder of coded integer streams: binary adaptive range coding (G. N. N.
 * Martin, "Range encoding", 1979) of the binarisation in ./code-model.ts.
 * spec/FORMAT.md, "Coded integer streams", states every step.
 */
import { Cell } from './mask.js';
import { encodeIntsKernel } from '../wasm/finish.js';
import { CLASS_AT, CONTEXTS, MANT_AT, MASK_CLASS_AT, MASK_SPECIAL_AT, newMaskModel, newModel, PROB_BITS, PROB_ONE, SHIFTS, SIGN_AT, ZERO_AT } from './code-model.js';

const TOP = 0x1000000; // 2^24: the range is renormalised to stay at or above it

/**
 * The output side of a range encoder: the bytes written so far, the last
 * byte held back (it may still take a carry) and how many 0xff follow it.
 * The coder's low end (below 2^32 plus a carry, held in a double, exact
 * below 2^53) is passed in and out, so a hot loop can keep it in a local.
 */
class ByteSink {
  private out: Uint8Array;
  private length = 0;
  private cache = 0;
  private pending = 0;
  private started = false;

  constructor(expected: number) {
    this.out = new Uint8Array(Math.max(64, expected));
  }

  /** Bytes written so far: the finished stream is at least this long. */
  get written(): number {
    return this.length;
  }

  private put(byte: number): void {
    if (this.length === this.out.length) {
      const next = new Uint8Array(this.out.length * 2);
      next.set(this.out);
      this.out = next;
    }
    this.out[this.length++] = byte;
  }

  /** Move the top byte of low out, propagating a carry into the bytes held back; returns the new low. */
  shiftLow(low: number): number {
    if (low < 0xff000000 || low >= 0x100000000) {
      const carry = low >= 0x100000000 ? 1 : 0;
      // The very first byte is always 0 (the interval starts inside [0, 1)): it is not written.
      if (this.started) this.put((this.cache + carry) & 0xff);
      this.started = true;
      for (; this.pending > 0; this.pending--) this.put((0xff + carry) & 0xff);
      this.cache = Math.floor(low / 0x1000000) & 0xff;
    } else this.pending++;
    return (low % 0x1000000) * 256;
  }

  /** Flush: the stream ends after enough bytes to pin down a value in the final interval. */
  finish(low: number): Uint8Array {
    let l = low;
    for (let i = 0; i < 5; i++) l = this.shiftLow(l);
    return this.out.slice(0, this.length);
  }
}

/** A range encoder writing into a growing byte buffer. */
export class RangeEncoder {
  private readonly sink: ByteSink;
  /** low is below 2^32 plus a carry (held in a double, exact below 2^53). */
  private low = 0;
  private range = 0xffffffff;
  private readonly p: Uint16Array;
  private readonly count: Uint8Array;

  constructor(expected = 1024, model = newModel()) {
    this.sink = new ByteSink(expected);
    this.p = model.p;
    this.count = model.count;
  }

  private shiftLow(): void {
    this.low = this.sink.shiftLow(this.low);
  }

  /** Code one bit with the adaptive probability of context `ctx`. */
  bit(bit: number, ctx: number): void {
    const p = this.p[ctx];
    const bound = (this.range >>> PROB_BITS) * p;
    const shift = SHIFTS[this.count[ctx]];
    if (this.count[ctx] < 255) this.count[ctx]++;
    if (bit === 0) {
      this.range = bound;
      this.p[ctx] = p + ((PROB_ONE - p) >> shift);
    } else {
      this.low += bound;
      this.range -= bound;
      this.p[ctx] = p - (p >> shift);
    }
    while (this.range < TOP) {
      this.range = (this.range * 256) >>> 0;
      this.shiftLow();
    }
  }

  /** Bytes written so far: the finished stream is at least this long (bytes only add). */
  get written(): number {
    return this.sink.written;
  }

  /** Width of the current interval (for a multi-symbol decision: see {@link interval}). */
  get width(): number {
    return this.range;
  }

  /** Narrow the interval to [low + lo, low + lo + width) of the current one (a multi-symbol decision, ./code-symbols.ts). */
  interval(lo: number, width: number): void {
    this.low += lo;
    this.range = width;
    while (this.range < TOP) {
      this.range = (this.range * 256) >>> 0;
      this.shiftLow();
    }
  }

  /** Code the low `bits` bits of v (most significant first) at probability 1/2. */
  direct(v: number, bits: number): void {
    for (let b = bits - 1; b >= 0; b--) {
      this.range = this.range >>> 1;
      if ((v >>> b) & 1) this.low += this.range;
      while (this.range < TOP) {
        this.range = (this.range * 256) >>> 0;
        this.shiftLow();
      }
    }
  }

  /** Flush: the stream ends after enough bytes to pin down a value in the final interval. */
  finish(): Uint8Array {
    return this.sink.finish(this.low);
  }
}

/**
 * Code an m x n grid of integers in raster order. Cells whose class in
 * `codes` is not Valid are skipped: they count as 0 for their neighbours
 * and the decoder sets them to 0. `codes` may be null (every cell valid).
 *
 * Each value is a zero flag in its neighbourhood bucket's context, then
 * (non-zero) its sign, its class k in unary, the two bits below its top
 * bit with adaptive contexts and the k - 2 lower bits at probability 1/2
 * (spec/FORMAT.md). The coder's range and low live in locals, in the
 * manner of the decoder (./code-decode.ts): each value's adaptive
 * decisions are listed (context and bit) and coded in one loop, then its
 * direct bits; the neighbours are carried along the row, and a run of
 * zeros in a zero neighbourhood takes a loop of its own.
 */
export function encodeInts(values: Int32Array, m: number, n: number, codes: Uint8Array | null): Uint8Array {
  return encodeIntsWithin(values, m, n, codes, Infinity)!;
}

/**
 * {@link encodeInts}, or null once the stream is known to be longer than
 * `atMost` bytes: the bytes written only add up (the flush adds more), so a
 * caller that needs a shorter stream stops there (checked after each row).
 */
export function encodeIntsWithin(values: Int32Array, m: number, n: number, codes: Uint8Array | null, atMost: number): Uint8Array | null {
  // The WebAssembly kernel where there is one (the same bytes; src/wasm/finish.ts), for the layout it is written for.
  if (CONTEXTS === 614 && Cell.Valid === 0) {
    const coded = encodeIntsKernel(values, m, n, codes, atMost);
    if (coded !== undefined) return coded;
  }
  // The model's layout in locals (a read of an imported binding goes through a cell in V8).
  const kZeroAt = ZERO_AT;
  const kSignAt = SIGN_AT;
  const kClassAt = CLASS_AT;
  const kMantAt = MANT_AT;
  const kProbBits = PROB_BITS;
  const kProbOne = PROB_ONE;
  const shifts = SHIFTS;
  const { p, count } = newModel();
  const sink = new ByteSink(values.length + 64);
  let low = 0;
  let range = 0xffffffff;
  // One value's adaptive decisions: zero flag, sign, up to 31 class bits, two mantissa bits.
  const ctxs = new Int32Array(36);
  const bits = new Uint8Array(36);
  const masked = codes !== null;
  const valid = Cell.Valid;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    let left = 0;
    let up = i > 0 ? values[row - n] : 0;
    let upLeft = 0;
    for (let j = 0; j < n; j++) {
      if (!masked && (left | up | upLeft) === 0) {
        // A run of zeros in a zero neighbourhood (most cells of a smooth field's residual): bucket 0
        // while the up-right code is 0, so each cell is one zero-flag decision of context ZERO_AT,
        // its probability and count held in locals, as the decoder reads it.
        let pr0 = p[kZeroAt];
        let cnt0 = count[kZeroAt];
        for (; j < n; j++) {
          const c = row + j;
          if (values[c] !== 0 || (i > 0 && j + 1 < n && values[c - n + 1] !== 0)) break;
          range = (range >>> kProbBits) * pr0;
          pr0 = pr0 + ((kProbOne - pr0) >> shifts[cnt0]);
          if (cnt0 < 255) cnt0++;
          while (range < TOP) {
            range = (range * 256) >>> 0;
            low = sink.shiftLow(low);
          }
        }
        p[kZeroAt] = pr0;
        count[kZeroAt] = cnt0;
        // The carried neighbours are all still 0 here.
        if (j === n) break;
      }
      const c = row + j;
      const upRight = i > 0 && j + 1 < n ? values[c - n + 1] : 0;
      const v = values[c];
      if (masked && codes[c] !== valid) {
        // The decoder sets skipped cells to 0: anything else would not round-trip.
        if (v !== 0) throw new Error(`internal: skipped cell ${c} holds ${v}, not 0`);
        left = 0;
        upLeft = up;
        up = upRight;
        continue;
      }
      const a = 2 * (left < 0 ? -left : left) + 2 * (up < 0 ? -up : up) + (upLeft < 0 ? -upLeft : upLeft) + (upRight < 0 ? -upRight : upRight);
      const bucket = 32 - Math.clz32(a > 0x7fff ? 0x7fff : a);
      let nd = 1;
      ctxs[0] = kZeroAt + bucket;
      bits[0] = v === 0 ? 0 : 1;
      const mag = v < 0 ? -v : v;
      let k = 0;
      if (v !== 0) {
        ctxs[1] = kSignAt + 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1);
        bits[1] = v < 0 ? 1 : 0;
        nd = 2;
        k = 31 - Math.clz32(mag); // |v| in [2^k, 2^(k+1))
        const cls = kClassAt + bucket * 31;
        for (let b = 0; b < k; b++) {
          ctxs[nd] = cls + b;
          bits[nd++] = 1;
        }
        if (k < 30) {
          ctxs[nd] = cls + k;
          bits[nd++] = 0;
        }
        if (k > 0) {
          const top = (mag >>> (k - 1)) & 1;
          ctxs[nd] = kMantAt + 3 * k;
          bits[nd++] = top;
          if (k > 1) {
            ctxs[nd] = kMantAt + 3 * k + 1 + top;
            bits[nd++] = (mag >>> (k - 2)) & 1;
          }
        }
      }
      for (let d = 0; d < nd; d++) {
        const ctx = ctxs[d];
        const pr = p[ctx];
        const bound = (range >>> kProbBits) * pr;
        const cnt = count[ctx];
        const shift = shifts[cnt];
        if (cnt < 255) count[ctx] = cnt + 1;
        if (bits[d] === 0) {
          range = bound;
          p[ctx] = pr + ((kProbOne - pr) >> shift);
        } else {
          low += bound;
          range -= bound;
          p[ctx] = pr - (pr >> shift);
        }
        while (range < TOP) {
          range = (range * 256) >>> 0;
          low = sink.shiftLow(low);
        }
      }
      // The bits below the top two, at probability 1/2, most significant first.
      for (let b = k - 3; b >= 0; b--) {
        range = range >>> 1;
        if ((mag >>> b) & 1) low += range;
        while (range < TOP) {
          range = (range * 256) >>> 0;
          low = sink.shiftLow(low);
        }
      }
      upLeft = up;
      up = upRight;
      left = v;
    }
    if (sink.written > atMost) return null;
  }
  return sink.finish(low);
}

/**
 * Code the class map of an m x n tile (class codes 0..5 of ./mask.ts) in
 * raster order with the class-map model (./code-model.ts).
 */
export function encodeClasses(codes: Uint8Array, m: number, n: number): Uint8Array {
  const enc = new RangeEncoder(codes.length / 8 + 64, newMaskModel());
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      const left = j > 0 && codes[c - 1] !== 0 ? 1 : 0;
      const up = i > 0 ? codes[c - n] : 0;
      // Classes come from classify() (0..5); a larger one above would index past the model.
      if (up > 5) throw new Error(`internal: class ${up} at cell ${c - n} is not 0..5`);
      const upLeft = i > 0 && j > 0 && codes[c - n - 1] !== 0 ? 1 : 0;
      const upRight = i > 0 && j + 1 < n && codes[c - n + 1] !== 0 ? 1 : 0;
      const ctx = left + 2 * (up !== 0 ? 1 : 0) + 4 * upLeft + 8 * upRight;
      if (codes[c] === 0) {
        enc.bit(0, MASK_SPECIAL_AT + ctx);
        continue;
      }
      enc.bit(1, MASK_SPECIAL_AT + ctx);
      const v = codes[c] - 1;
      const base = MASK_CLASS_AT + 7 * up;
      const b2 = (v >> 2) & 1;
      const b1 = (v >> 1) & 1;
      enc.bit(b2, base);
      enc.bit(b1, base + 1 + b2);
      enc.bit(v & 1, base + 3 + 2 * b2 + b1);
    }
  }
  return enc.finish();
}
