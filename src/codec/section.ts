/**
 * Compressed sections inside a tile payload, and the integer packing used in
 * them. A section is `u32 rawLength, u32 storedLength, stored bytes`, where
 * the stored bytes are a raw DEFLATE stream (RFC 1951) that inflates to
 * exactly `rawLength` bytes and ends with the stored bytes. Writing uses
 * fflate; reading uses the strict decoder of ./inflate.ts.
 */
import { deflateSync } from 'fflate';
import { FormatCode, FormatError } from '../errors.js';
import { ByteReader, ByteWriter } from '../format/bytes.js';
import { InflateError, inflateInto } from './inflate.js';

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
 * No DEFLATE stream inflates to more than 1032 times its stored size: the
 * densest a stream can be is two 1-bit codes per 258-byte match (a length
 * code 285 and a distance code, each the only code of length 1; RFC 1951,
 * section 3.2.5), i.e. 258 bytes per 2 bits (from memory; zlib documents the
 * same 1032:1 limit). A raw length above this ratio is refused before
 * anything is allocated.
 */
export const MAX_INFLATE_RATIO = 1032;

/**
 * Read one section. `expected` is the raw length the context requires
 * (or a maximum when `exact` is false); anything else is refused before
 * inflating, as is a raw length no stream of the stored size can produce.
 * The stream is inflated into a buffer of exactly the raw length: it may not
 * produce more (inflating stops at the first byte too many) or fewer bytes,
 * and may not be followed by stored bytes after its final block.
 */
export function readSection(r: ByteReader, what: string, expected: number, exact = true): Uint8Array {
  const start = r.offset;
  const rawLength = r.u32(`${what} raw length`);
  const storedLength = r.u32(`${what} stored length`);
  const at = `section at ${r.unit} ${start}`;
  if (exact ? rawLength !== expected : rawLength > expected) {
    throw new FormatError(
      FormatCode.Malformed,
      `${r.where}: ${what} declares ${rawLength} raw bytes where ${exact ? '' : 'at most '}${expected} are allowed (section at ${r.unit} ${start})`,
    );
  }
  const stored = r.bytesView(storedLength, `${what} data`);
  if (storedLength === 0) throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} has an empty DEFLATE stream (${at})`);
  if (rawLength > MAX_INFLATE_RATIO * storedLength) {
    throw new FormatError(
      FormatCode.Malformed,
      `${r.where}: ${what} declares ${rawLength} raw bytes, more than any ${storedLength}-byte DEFLATE stream can hold (${at})`,
    );
  }
  const out = new Uint8Array(rawLength);
  try {
    inflateInto(stored, out);
  } catch (e) {
    if (!(e instanceof InflateError)) throw e;
    const byte = `stored byte ${e.at} of ${storedLength}`;
    let message: string;
    if (e.kind === 'overflow') message = `inflates to more than ${rawLength} bytes, the declared raw length (${at}, ${byte})`;
    else if (e.kind === 'short') message = `inflates to ${e.produced} bytes, not the declared ${rawLength} (${at})`;
    else if (e.kind === 'trailing') message = `has ${e.message} of its DEFLATE data (${at})`;
    else message = `is not a valid DEFLATE stream: ${e.message} (${at}, ${byte})`;
    throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} ${message}`);
  }
  return out;
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
  const at = r.offset;
  const width = r.u8(`${what} width`);
  if (width !== 1 && width !== 2 && width !== 4) {
    throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} integer width ${width} at ${r.unit} ${at} is not 1, 2 or 4`);
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
      throw new FormatError(FormatCode.Malformed, `${r.where}: ${what} value ${i} (packed at ${r.unit} ${at}) exceeds 2^30 in magnitude`);
    }
    out[i] = unzigzag(z);
  }
}
