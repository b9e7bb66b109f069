/** Baseline 1: DEFLATE (fflate, level 9) of the raw float32 bytes; lossless. */
import { deflateSync, inflateSync } from 'fflate';
import { LEVEL } from './bytes.js';
import type { Codec } from './codec.js';

export const deflateRaw: Codec = {
  id: 'deflate',
  describe: 'DEFLATE (fflate, level 9) of the raw little-endian float32 bytes; lossless, so it meets every bound.',
  encode(field) {
    const v = field.values;
    return deflateSync(new Uint8Array(v.buffer, v.byteOffset, v.byteLength), { level: LEVEL });
  },
  decode(bytes) {
    const raw = inflateSync(bytes);
    if (raw.length % 4 !== 0) throw new Error('deflate baseline: inflated length is not a multiple of 4');
    // Reinterpret in place when aligned; copy otherwise.
    return raw.byteOffset % 4 === 0 ? new Float32Array(raw.buffer, raw.byteOffset, raw.length / 4) : new Float32Array(raw.slice().buffer);
  },
};
