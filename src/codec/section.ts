/**
 * Compressed sections inside a tile payload, and the integer packing used in
 * them. A section is `u32 rawLength, u32 storedLength, stored bytes`, where
 * the stored bytes are a raw DEFLATE stream (RFC 1951) that inflates to
 * exactly `rawLength` bytes.
 */
import { deflateSync, inflateSync } from 'fflate';
import { FormatCode, FormatError } from '../errors.js';
import { ByteReader, ByteWriter } from '../format/bytes.js';

/** DEFLATE level for every section; fixed so archives are reproducible. */
export const DEFLATE_LEVEL = 6;

/** Append `raw` as a compressed section. */
export function writeSection(w: ByteWriter, raw: Uint8Array): void {
  const stored = deflateSync(raw, { level: DEFLATE_LEVEL });
  w.u32(raw.length);
  w.u32(stored.length);
  w.bytes(stored);
}

/** Bytes a section holding `raw` takes, without writing it. */
export function sectionSize(raw: Uint8Array): number {
  return 8 + deflateSync(raw, { level: DEFLATE_LEVEL }).length;
}

/**
 * Read one section. `expected` is the raw length the context requires
 * (or a maximum when `exact` is false); anything else is refused before
 * inflating, and the stream may not inflate to more or fewer bytes.
 */
export function readSection(r: ByteReader, what: string, expected: number, exact = true): Uint8Array {
  const rawLength = r.u32(`${what} raw length`);
  const storedLength = r.u32(`${what} stored length`);
  if (exact ? rawLength !== expected : rawLength > expected) {
    throw new FormatError(
      FormatCode.Malformed,
      `${r.where}: ${what} declares ${rawLength} raw bytes where ${exact ? '' : 'at most '}${expected} are allowed`,
    );
  }
  const stored = r.bytesView(storedLength, `${what} data`);
  if (storedLength === 0) throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} has an empty DEFLATE stream`);
  // One spare byte: an inflate that fills it produced more than declared.
  const out = new Uint8Array(rawLength + 1);
  let got: Uint8Array;
  try {
    got = inflateSync(stored, { out });
  } catch (e) {
    throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} is not a valid DEFLATE stream (${(e as Error).message})`);
  }
  if (got.length !== rawLength) {
    throw new FormatError(
      FormatCode.Malformed,
      `${r.where}: ${what} inflates to ${got.length > rawLength ? `more than ${rawLength}` : got.length} bytes, not the declared ${rawLength}`,
    );
  }
  return got.subarray(0, rawLength);
}

/** Zigzag map of a signed integer to an unsigned one: 0,-1,1,-2,.. -> 0,1,2,3,.. */
export function zigzag(v: number): number {
  return v >= 0 ? 2 * v : -2 * v - 1;
}

/** Inverse of {@link zigzag}. */
export function unzigzag(u: number): number {
  return u % 2 === 0 ? u / 2 : -(u + 1) / 2;
}

/** Largest magnitude an integer in a packed run may have (2^30). */
export const MAX_INT = 0x40000000;

/**
 * Pack signed integers (|v| <= 2^30): one byte `width` (1, 2 or 4), then the
 * zigzagged values as `width` byte planes (all low bytes, then the next
 * bytes, ...), which DEFLATE compresses better than interleaved bytes.
 */
export function packInts(values: Int32Array, w: ByteWriter): void {
  let max = 0;
  for (let i = 0; i < values.length; i++) {
    const z = zigzag(values[i]);
    if (z > max) max = z;
  }
  const width = max < 0x100 ? 1 : max < 0x10000 ? 2 : 4;
  w.u8(width);
  const n = values.length;
  const planes = new Uint8Array(n * width);
  for (let i = 0; i < n; i++) {
    let z = zigzag(values[i]);
    for (let b = 0; b < width; b++) {
      planes[b * n + i] = z & 0xff;
      z = Math.floor(z / 256);
    }
  }
  w.bytes(planes);
}

/** Bytes {@link packInts} writes for `n` values of the given width. */
export function packedIntsSize(n: number, width: number): number {
  return 1 + n * width;
}

/** Read `n` integers written by {@link packInts} into `out` (length n). */
export function unpackInts(r: ByteReader, out: Int32Array, what: string): void {
  const width = r.u8(`${what} width`);
  if (width !== 1 && width !== 2 && width !== 4) {
    throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} integer width ${width} is not 1, 2 or 4`);
  }
  const n = out.length;
  const planes = r.bytesView(n * width, `${what} values`);
  for (let i = 0; i < n; i++) {
    let z = 0;
    let scale = 1;
    for (let b = 0; b < width; b++) {
      z += planes[b * n + i] * scale;
      scale *= 256;
    }
    if (z > 2 * MAX_INT) {
      throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} value ${i} exceeds 2^30 in magnitude`);
    }
    out[i] = unzigzag(z);
  }
}
