/**
 * Little-endian byte writing and bounds-checked reading. Every read past the
 * end raises a {@link FormatError} naming `where`, never a RangeError.
 */
import { FormatCode, FormatError } from '../errors.js';

/** Most bytes of a varint that holds a byte length (a value below 2^32). */
export const LENGTH_BYTES = 5;

/**
 * What is wrong with a varint whose last byte `b` is byte `k` (from 0) and
 * whose value is `v`, or null: not the shortest form (a last byte of 0
 * after the first), or a value of 2^32 or more.
 */
export function varintProblem(b: number, k: number, v: number): string | null {
  if (b === 0 && k > 0) return 'is not in its shortest form';
  if (v >= 2 ** 32) return `holds ${v}, not a value below 2^32`;
  return null;
}

/** Appends little-endian values to a buffer grown by doubling. */
export class ByteWriter {
  private buf: Uint8Array;
  private view: DataView;
  /** Bytes written so far. */
  length = 0;

  constructor(initial = 256) {
    this.buf = new Uint8Array(Math.max(16, initial));
    this.view = new DataView(this.buf.buffer);
  }

  private reserve(extra: number): void {
    const need = this.length + extra;
    if (need <= this.buf.length) return;
    let size = this.buf.length * 2;
    while (size < need) size *= 2;
    const next = new Uint8Array(size);
    next.set(this.buf.subarray(0, this.length));
    this.buf = next;
    this.view = new DataView(next.buffer);
  }

  u8(v: number): void {
    this.reserve(1);
    this.buf[this.length++] = v;
  }
  u16(v: number): void {
    this.reserve(2);
    this.view.setUint16(this.length, v, true);
    this.length += 2;
  }
  i16(v: number): void {
    this.reserve(2);
    this.view.setInt16(this.length, v, true);
    this.length += 2;
  }
  u32(v: number): void {
    this.reserve(4);
    this.view.setUint32(this.length, v, true);
    this.length += 4;
  }
  /** An unsigned integer below 2^53, written as 8 bytes. */
  u64(v: number): void {
    this.reserve(8);
    this.view.setUint32(this.length, v % 0x100000000, true);
    this.view.setUint32(this.length + 4, Math.floor(v / 0x100000000), true);
    this.length += 8;
  }
  f64(v: number): void {
    this.reserve(8);
    this.view.setFloat64(this.length, v, true);
    this.length += 8;
  }
  /** A binary32 value; the caller makes sure `v` is one (Math.fround(v) === v). */
  f32(v: number): void {
    this.reserve(4);
    this.view.setFloat32(this.length, v, true);
    this.length += 4;
  }
  /** An unsigned integer below 2^32 as a LEB128 varint: 7 bits a byte, low bits first, high bit set on every byte but the last. */
  varint(v: number): void {
    this.reserve(5);
    while (v >= 0x80) {
      this.buf[this.length++] = (v & 0x7f) | 0x80;
      v >>>= 7;
    }
    this.buf[this.length++] = v;
  }
  /** A signed integer of magnitude below 2^27 as the varint of its zigzag code (0, -1, 1, -2, ... to 0, 1, 2, 3, ...). */
  svarint(v: number): void {
    this.varint(v < 0 ? -2 * v - 1 : 2 * v);
  }
  bytes(b: Uint8Array): void {
    this.reserve(b.length);
    this.buf.set(b, this.length);
    this.length += b.length;
  }
  /** The bytes written, as a view (valid until the next write). */
  view8(): Uint8Array {
    return this.buf.subarray(0, this.length);
  }
  /** A copy of the bytes written. */
  finish(): Uint8Array {
    return this.buf.slice(0, this.length);
  }
}

/** Reads little-endian values from a byte range, checking every bound. */
export class ByteReader {
  readonly bytes: Uint8Array;
  private readonly view: DataView;
  pos = 0;
  /** Names the structure in error messages, e.g. "field 't2m' tile 17". */
  readonly where: string;
  /** Offset of `bytes[0]` for messages (the file offset of a payload, when known). */
  readonly base: number;
  /** What offsets in messages count: "file offset", "payload offset", "raw offset" (inside inflated data), ... */
  readonly unit: string;

  constructor(bytes: Uint8Array, where: string, base = 0, unit = 'offset') {
    this.bytes = bytes;
    this.view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
    this.where = where;
    this.base = base;
    this.unit = unit;
  }

  /** Bytes not yet read. */
  get remaining(): number {
    return this.bytes.length - this.pos;
  }

  /** The current position as messages state it (base + pos). */
  get offset(): number {
    return this.base + this.pos;
  }

  private need(n: number, what: string): void {
    if (n > this.bytes.length - this.pos) {
      throw new FormatError(
        FormatCode.Truncated,
        `${this.where}: ${what} needs ${n} bytes at ${this.unit} ${this.offset} but only ${this.bytes.length - this.pos} remain`,
      );
    }
  }

  u8(what = 'a byte'): number {
    this.need(1, what);
    return this.bytes[this.pos++];
  }
  u16(what = 'a 16-bit value'): number {
    this.need(2, what);
    const v = this.view.getUint16(this.pos, true);
    this.pos += 2;
    return v;
  }
  i16(what = 'a 16-bit value'): number {
    this.need(2, what);
    const v = this.view.getInt16(this.pos, true);
    this.pos += 2;
    return v;
  }
  u32(what = 'a 32-bit value'): number {
    this.need(4, what);
    const v = this.view.getUint32(this.pos, true);
    this.pos += 4;
    return v;
  }
  /** An 8-byte unsigned integer; refused above 2^53 - 1. */
  u64(what = 'a 64-bit value'): number {
    this.need(8, what);
    const lo = this.view.getUint32(this.pos, true);
    const hi = this.view.getUint32(this.pos + 4, true);
    if (hi >= 0x200000) {
      throw new FormatError(FormatCode.Malformed, `${this.where}: ${what} at ${this.unit} ${this.offset} exceeds 2^53`);
    }
    this.pos += 8;
    return hi * 0x100000000 + lo;
  }
  f64(what = 'a float64'): number {
    this.need(8, what);
    const v = this.view.getFloat64(this.pos, true);
    this.pos += 8;
    return v;
  }
  /** A binary32 value, widened exactly to a number. */
  f32(what = 'a float32'): number {
    this.need(4, what);
    const v = this.view.getFloat32(this.pos, true);
    this.pos += 4;
    return v;
  }
  /**
   * A LEB128 varint of at most `maxBytes` bytes (at most 5), in its shortest
   * form: a longer one (a last byte of 0 after the first) is refused, so
   * every value has one encoding; so is a value of 2^32 or more.
   */
  varint(what = 'a varint', maxBytes = 3): number {
    const at = this.offset;
    let v = 0;
    for (let k = 0; k < maxBytes; k++) {
      const b = this.u8(what);
      v += (b & 0x7f) * 2 ** (7 * k);
      if (b < 0x80) {
        const problem = varintProblem(b, k, v);
        if (problem !== null) throw new FormatError(FormatCode.Malformed, `${this.where}: ${what} at ${this.unit} ${at} ${problem}`);
        return v;
      }
    }
    throw new FormatError(FormatCode.Malformed, `${this.where}: ${what} at ${this.unit} ${at} runs over ${maxBytes} bytes`);
  }
  /** A byte length: a varint of at most {@link LENGTH_BYTES} bytes, below 2^32. */
  length(what = 'a length'): number {
    return this.varint(what, LENGTH_BYTES);
  }
  /** A signed integer stored as the varint of its zigzag code (see ByteWriter.svarint). */
  svarint(what = 'a signed varint', maxBytes = 3): number {
    const z = this.varint(what, maxBytes);
    return z % 2 === 0 ? z / 2 : -(z + 1) / 2;
  }
  bytesView(n: number, what = 'a byte run'): Uint8Array {
    this.need(n, what);
    const b = this.bytes.subarray(this.pos, this.pos + n);
    this.pos += n;
    return b;
  }
}
