/**
 * Measuring a candidate payload against its original tile with the decoder's
 * own code: the per-tile facts recorded in the index, and the progressive
 * prefixes worth recording.
 */
import { FormatError } from '../errors.js';
import { crc32 } from '../format/crc32.js';
import type { FloatArray } from '../types.js';
import { Cell } from './mask.js';
import { payloadHead, prefixLengths } from './payload.js';
import type { PreparedTile } from './prepare.js';
import { ErrorTally } from './tally.js';
import { decodeTile } from './tile-decode.js';
import { tallyKernel } from '../wasm/finish.js';

/**
 * Per-tile facts recorded in the index, as the encoder measured them (library
 * names); the index stores them as format/schema.ts's TileColumns (file keys:
 * max_err, value_crc) and a reader hands one tile's out as archive.ts's TileEntry.
 */
export interface TileStats {
  method: number;
  rank: number;
  valid: number;
  maxErr: number;
  rmse: number;
  valueCrc: number;
  /**
   * Progressive prefixes, four numbers each: byte length, CRC-32 of those
   * bytes, max error and RMSE of the values they decode to (factor groups
   * only, no residual). Only prefixes shorter than the payload are listed.
   */
  prefix: number[];
}

/** Decode a payload and measure it against the original tile. */
export function measure(payload: Uint8Array, t: PreparedTile, fill: Uint32Array | null): { stats: TileStats; tally: ErrorTally } {
  const codes = t.classes.codes;
  let out: FloatArray;
  try {
    out = decodeTile(payload, { m: t.m, n: t.n, dtype: t.dtype, fill, where: 'encoder check', fieldStep: t.fieldStep, layer: t.layer, symbols: true });
  } catch (e) {
    // A candidate the decoder refuses (e.g. values rounding past the float32 maximum)
    // fails every bound, so the caller falls back to exact storage.
    if (!(e instanceof FormatError)) throw e;
    const tally = new ErrorTally();
    tally.add(NaN);
    return { stats: { method: payload[0], rank: 0, valid: t.valid, maxErr: NaN, rmse: NaN, valueCrc: 0, prefix: [] }, tally };
  }
  const tally = tallyValid(t.orig, out, codes);
  const { rank } = payloadHead(payload);
  const valueCrc = crc32(new Uint8Array(out.buffer, out.byteOffset, out.byteLength));
  return { stats: { method: payload[0], rank, valid: t.valid, maxErr: tally.max, rmse: tally.rmse, valueCrc, prefix: [] }, tally };
}

/**
 * The tally of |orig - out| over the cells whose class in `codes` is
 * Valid, in cell order: by the kernel where there is one (the same state
 * to the bit: src/wasm/finish.ts), else add() a cell at a time. Every
 * cell is compared either way.
 */
export function tallyValid(orig: FloatArray, out: FloatArray, codes: Uint8Array): ErrorTally {
  const state = Cell.Valid === 0 && orig.constructor === out.constructor && orig.length >= codes.length && out.length >= codes.length ? tallyKernel(orig, out, codes) : null;
  if (state !== null) return ErrorTally.fromState(state);
  const tally = new ErrorTally();
  for (let c = 0; c < codes.length; c++) if (codes[c] === Cell.Valid) tally.add(Math.abs(orig[c] - out[c]));
  return tally;
}

/** A prefix is recorded only if it is at most this share of its payload ... */
const PREFIX_MAX_SHARE = 0.75;
/** ... and saves at least this many bytes. */
const PREFIX_MIN_SAVING = 64;

/**
 * Measure every progressive prefix of a payload with the decoder's own
 * prefix reading, so a reader can choose one from the index alone.
 */
export function measurePrefixes(payload: Uint8Array, t: PreparedTile, fill: Uint32Array | null): number[] {
  const out: number[] = [];
  const lens = prefixLengths(payload);
  lens.forEach((len, groups) => {
    // The centre alone (no factor group) is never worth offering: its error is about the tile's range.
    if (groups === 0) return;
    // A prefix is worth its index entry (under 20 bytes) only if it saves a good share of the payload.
    if (len > PREFIX_MAX_SHARE * payload.length || payload.length - len < PREFIX_MIN_SAVING) return;
    const bytes = payload.subarray(0, len);
    let values: FloatArray;
    try {
      values = decodeTile(bytes, { m: t.m, n: t.n, dtype: t.dtype, fill, where: 'encoder check', fieldStep: t.fieldStep, groups, layer: t.layer, symbols: true });
    } catch (e) {
      if (e instanceof FormatError) return; // a prefix that does not decode (values past the float maximum) is not offered
      throw e;
    }
    const tally = tallyValid(t.orig, values, t.classes.codes);
    if (Number.isFinite(tally.max)) out.push(len, crc32(bytes), tally.max, tally.rmse);
  });
  return out;
}
