/**
 * Missing cells (non-finite values and the fill value) for the lossy
 * baselines: they are replaced by the mean of the valid values before
 * modelling, and their exact bits are stored (a deflated bitmap plus the raw
 * words) and put back after decoding, as rankfield does with its mask.
 */
import { isMissing } from '../metrics.js';
import type { Reader, Writer } from './bytes.js';

export interface Prepared {
  /** The values as float64, missing cells set to the mean of the valid ones. */
  filled: Float64Array;
  /** Cell indices of missing cells, ascending. */
  missing: Uint32Array;
  /** Largest |value| among valid cells. */
  amax: number;
  /** Number of valid cells. */
  valid: number;
  /** Min and max of the valid values (0, 0 when none). */
  lo: number;
  hi: number;
}

export function prepare(values: Float32Array, fill: number | null): Prepared {
  const f = fill === null ? null : Math.fround(fill);
  const filled = new Float64Array(values.length);
  const missing: number[] = [];
  let sum = 0;
  let amax = 0;
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (isMissing(v, f)) {
      missing.push(i);
      continue;
    }
    filled[i] = v;
    sum += v;
    if (Math.abs(v) > amax) amax = Math.abs(v);
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  const valid = values.length - missing.length;
  const mean = valid > 0 ? sum / valid : 0;
  for (const i of missing) filled[i] = mean;
  if (!(lo <= hi)) lo = hi = 0;
  return { filled, missing: Uint32Array.from(missing), amax, valid, lo, hi };
}

/** u32 count; then a bitmap section of all cells and a section of the missing cells' raw float32 words. */
export function writeMissing(w: Writer, values: Float32Array, p: Prepared): void {
  w.u32(p.missing.length);
  if (p.missing.length === 0) return;
  const bitmap = new Uint8Array(Math.ceil(values.length / 8));
  const words = new Uint32Array(values.buffer, values.byteOffset, values.length);
  const raw = new Uint32Array(p.missing.length);
  p.missing.forEach((c, k) => {
    bitmap[c >> 3] |= 1 << (c & 7);
    raw[k] = words[c];
  });
  w.section(bitmap);
  w.section(new Uint8Array(raw.buffer));
}

/**
 * Read what {@link writeMissing} wrote; returns a function that puts the
 * exact bits back into the decoded values (called once they are computed).
 */
export function readMissing(r: Reader, cells: number): (out: Float32Array) => void {
  const count = r.u32();
  if (count === 0) return () => {};
  const bitmap = r.section();
  const rawBytes = r.section();
  if (rawBytes.length !== 4 * count || bitmap.length !== Math.ceil(cells / 8)) throw new Error('baseline stream: bad missing-cell sections');
  const raw = new Uint32Array(rawBytes.slice().buffer);
  return (out) => {
    const words = new Uint32Array(out.buffer, out.byteOffset, out.length);
    let k = 0;
    for (let c = 0; c < out.length; c++) if (bitmap[c >> 3] & (1 << (c & 7))) words[c] = raw[k++];
    if (k !== count) throw new Error('baseline stream: missing-cell count does not match the bitmap');
  };
}
