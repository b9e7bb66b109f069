/**
 * Writing DEFLATE sections (the format of ./section.ts) with fflate. Kept
 * apart from the reader so the browser decoding entry imports no compressor.
 */
import { deflateSync } from 'fflate';
import type { ByteWriter } from '../format/bytes.js';

/** DEFLATE level for every section; fixed so archives are reproducible. */
export const DEFLATE_LEVEL = 6;

/** Append `raw` as a compressed section. */
export function writeSection(w: ByteWriter, raw: Uint8Array): void {
  const stored = deflateSync(raw, { level: DEFLATE_LEVEL });
  w.varint(raw.length);
  w.varint(stored.length);
  w.bytes(stored);
}

