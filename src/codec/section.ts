/**
 * Reading DEFLATE sections of a tile payload (exact values, exceptions). A
 * section is `varint rawLength, varint storedLength, stored bytes`, where the stored bytes are a raw DEFLATE stream (RFC 1951) that inflates to
 * exactly `rawLength` bytes and ends with the stored bytes. Reading (here)
 * uses the strict decoder of ./inflate.ts; writing is in ./section-write.ts,
 * so the decoding entry imports no compressor.
 */
import { FormatCode, FormatError } from '../errors.js';
import type { ByteReader } from '../format/bytes.js';
import { InflateError, inflateInto } from './inflate.js';

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
  const rawLength = r.length(`${what} raw length`);
  const storedLength = r.length(`${what} stored length`);
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

/** Largest magnitude of a factor or residual code (2^30). */
export const MAX_INT = 0x40000000;

