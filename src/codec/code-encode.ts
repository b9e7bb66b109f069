/**
 * Encoder of coded integer streams: binary adaptive range coding (G. N. N.
 * Martin, "Range encoding", 1979) of the binarisation in ./code-model.ts.
 * spec/FORMAT.md, "Coded integer streams", states every step.
 */
import { Cell } from './mask.js';
import { bucketOf, CLASS_AT, MANT_AT, MASK_CLASS_AT, MASK_SPECIAL_AT, newMaskModel, newModel, PROB_BITS, PROB_ONE, SHIFTS, SIGN_AT, signContext, ZERO_AT } from './code-model.js';

const TOP = 0x1000000; // 2^24: the range is renormalised to stay at or above it

/** A range encoder writing into a growing byte buffer. */
export class RangeEncoder {
  private out: Uint8Array;
  private length = 0;
  /** low is below 2^32 plus a carry (held in a double, exact below 2^53). */
  private low = 0;
  private range = 0xffffffff;
  /** The last byte not yet written (it may still take a carry) and how many 0xff follow it. */
  private cache = 0;
  private pending = 0;
  private started = false;
  private readonly p: Uint16Array;
  private readonly count: Uint8Array;

  constructor(expected = 1024, model = newModel()) {
    this.out = new Uint8Array(Math.max(64, expected));
    this.p = model.p;
    this.count = model.count;
  }

  private put(byte: number): void {
    if (this.length === this.out.length) {
      const next = new Uint8Array(this.out.length * 2);
      next.set(this.out);
      this.out = next;
    }
    this.out[this.length++] = byte;
  }

  /** Move the top byte of low out, propagating a carry into the bytes held back. */
  private shiftLow(): void {
    const low = this.low;
    if (low < 0xff000000 || low >= 0x100000000) {
      const carry = low >= 0x100000000 ? 1 : 0;
      // The very first byte is always 0 (the interval starts inside [0, 1)): it is not written.
      if (this.started) this.put((this.cache + carry) & 0xff);
      this.started = true;
      for (; this.pending > 0; this.pending--) this.put((0xff + carry) & 0xff);
      this.cache = Math.floor(low / 0x1000000) & 0xff;
    } else this.pending++;
    this.low = (low % 0x1000000) * 256;
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

  /** Code one signed integer given its neighbourhood bucket and sign context. */
  value(v: number, bucket: number, sctx: number): void {
    if (v === 0) {
      this.bit(0, ZERO_AT + bucket);
      return;
    }
    this.bit(1, ZERO_AT + bucket);
    this.bit(v < 0 ? 1 : 0, SIGN_AT + sctx);
    const mag = v < 0 ? -v : v;
    const k = 31 - Math.clz32(mag); // |v| in [2^k, 2^(k+1))
    const cls = CLASS_AT + bucket * 31;
    for (let i = 0; i < k; i++) this.bit(1, cls + i);
    if (k < 30) this.bit(0, cls + k);
    if (k === 0) return;
    const top = (mag >>> (k - 1)) & 1;
    this.bit(top, MANT_AT + 3 * k);
    if (k === 1) return;
    this.bit((mag >>> (k - 2)) & 1, MANT_AT + 3 * k + 1 + top);
    if (k > 2) this.direct(mag, k - 2);
  }

  /** Flush: the stream ends after enough bytes to pin down a value in the final interval. */
  finish(): Uint8Array {
    for (let i = 0; i < 5; i++) this.shiftLow();
    return this.out.slice(0, this.length);
  }
}

/**
 * Code an m x n grid of integers in raster order. Cells whose class in
 * `codes` is not Valid are skipped: they count as 0 for their neighbours
 * and the decoder sets them to 0. `codes` may be null (every cell valid).
 */
export function encodeInts(values: Int32Array, m: number, n: number, codes: Uint8Array | null): Uint8Array {
  const enc = new RangeEncoder(values.length + 64);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = i * n + j;
      if (codes !== null && codes[c] !== Cell.Valid) {
        // The decoder sets skipped cells to 0: anything else would not round-trip.
        if (values[c] !== 0) throw new Error(`internal: skipped cell ${c} holds ${values[c]}, not 0`);
        continue;
      }
      const left = j > 0 ? values[c - 1] : 0;
      const up = i > 0 ? values[c - n] : 0;
      const upLeft = i > 0 && j > 0 ? values[c - n - 1] : 0;
      const upRight = i > 0 && j + 1 < n ? values[c - n + 1] : 0;
      enc.value(values[c], bucketOf(left, up, upLeft, upRight), signContext(left, up));
    }
  }
  return enc.finish();
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
