/**
 * Byte writing and reading for the baselines' own small streams: little-endian
 * numbers, DEFLATE sections (fflate, level 9) and packed integers. Every
 * baseline writes everything its decoder needs into its bytes, so its size in
 * the tables is the whole cost.
 */
import { deflateSync, inflateSync } from 'fflate';
import { ByteWriter } from '../../src/format/bytes.js';

/** DEFLATE level used by every baseline, as the issue asks. */
export const LEVEL = 9;

/** Largest integer magnitude the packers accept (2^30). */
export const MAX_INT = 0x40000000;

/** Thrown when a baseline cannot meet the bound; the row is marked failed with this message. */
export class BaselineFailure extends Error {}

/** The library's little-endian writer, plus the baselines' sections and packed integers. */
export class Writer extends ByteWriter {
  /** u32 raw length, u32 stored length, DEFLATE stream. */
  section(raw: Uint8Array): void {
    const stored = deflateSync(raw, { level: LEVEL });
    this.u32(raw.length);
    this.u32(stored.length);
    this.bytes(stored);
  }
  /** Integers (|v| <= 2^30) zigzagged into 1, 2 or 4 byte planes, as one section. */
  ints(values: ArrayLike<number>): void {
    this.section(packInts(values));
  }
}

/** Reads what {@link Writer} wrote; throws on anything short or malformed. */
export class Reader {
  private pos = 0;
  private readonly view: DataView;
  constructor(private readonly buf: Uint8Array) {
    this.view = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
  }
  private need(n: number): void {
    if (this.pos + n > this.buf.length) throw new Error(`baseline stream: need ${n} bytes at ${this.pos}, have ${this.buf.length - this.pos}`);
  }
  u8(): number {
    this.need(1);
    return this.buf[this.pos++];
  }
  u32(): number {
    this.need(4);
    const v = this.view.getUint32(this.pos, true);
    this.pos += 4;
    return v;
  }
  f64(): number {
    this.need(8);
    const v = this.view.getFloat64(this.pos, true);
    this.pos += 8;
    return v;
  }
  bytes(n: number): Uint8Array {
    this.need(n);
    const out = this.buf.subarray(this.pos, this.pos + n);
    this.pos += n;
    return out;
  }
  section(): Uint8Array {
    const raw = this.u32();
    const stored = this.u32();
    const out = inflateSync(this.bytes(stored), { out: new Uint8Array(raw) });
    if (out.length !== raw) throw new Error(`baseline stream: section inflates to ${out.length} bytes, not ${raw}`);
    return out;
  }
  ints(n: number): Int32Array {
    return unpackInts(this.section(), n);
  }
  end(): void {
    if (this.pos !== this.buf.length) throw new Error(`baseline stream: ${this.buf.length - this.pos} trailing bytes`);
  }
}

/** Zigzag (0,-1,1,-2,.. -> 0,1,2,3,..) into the smallest width of byte planes; the first byte is the width. */
export function packInts(values: ArrayLike<number>): Uint8Array {
  const n = values.length;
  let max = 0;
  for (let i = 0; i < n; i++) {
    const v = values[i];
    if (!(Math.abs(v) <= MAX_INT)) throw new BaselineFailure(`quantized integer ${v} exceeds 2^30 in magnitude`);
    const z = v >= 0 ? 2 * v : -2 * v - 1;
    if (z > max) max = z;
  }
  const width = max < 0x100 ? 1 : max < 0x10000 ? 2 : 4;
  const out = new Uint8Array(1 + n * width);
  out[0] = width;
  for (let i = 0; i < n; i++) {
    const v = values[i];
    let z = v >= 0 ? 2 * v : -2 * v - 1;
    // Byte planes (all low bytes first) compress better than interleaved bytes.
    for (let b = 0; b < width; b++) {
      out[1 + b * n + i] = z & 0xff;
      z = Math.floor(z / 256);
    }
  }
  return out;
}

/** Inverse of {@link packInts}. */
export function unpackInts(raw: Uint8Array, n: number): Int32Array {
  const width = raw[0];
  if ((width !== 1 && width !== 2 && width !== 4) || raw.length !== 1 + n * width) throw new Error('baseline stream: bad packed integers');
  const out = new Int32Array(n);
  for (let i = 0; i < n; i++) {
    let z = 0;
    let scale = 1;
    for (let b = 0; b < width; b++) {
      z += raw[1 + b * n + i] * scale;
      scale *= 256;
    }
    out[i] = z % 2 === 0 ? z / 2 : -(z + 1) / 2;
  }
  return out;
}
