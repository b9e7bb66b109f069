/**
 * Missing cells. Each cell of a tile has a class code; every class but
 * VALID is restored bit for bit and excluded from error bounds.
 */
import type { Dtype } from '../types.js';

/** Cell class codes as stored in a tile's mask section. */
export const Cell = {
  /** An ordinary finite value, subject to the bound. */
  Valid: 0,
  /** The field's fill value (bit-identical match). */
  Fill: 1,
  PosInf: 2,
  NegInf: 3,
  /** The canonical quiet NaN: 0x7FC00000 (f32) or 0x7FF8000000000000 (f64). */
  NaN: 4,
  /** Any other NaN; its bits follow the codes in the mask section. */
  RawNaN: 5,
} as const;

if (new Uint8Array(new Uint16Array([1]).buffer)[0] !== 1) {
  throw new Error('rankfield needs a little-endian host');
}

/** Bit patterns of a tile's values, as 32-bit words (one per f32, two per f64). */
export function wordsOf(values: Float32Array | Float64Array): Uint32Array {
  return new Uint32Array(values.buffer, values.byteOffset, values.byteLength / 4);
}

/** The fill value's words in the field's dtype, or null when there is none (or it is NaN). */
export function fillWords(fill: number | null | undefined, dtype: Dtype): Uint32Array | null {
  if (fill === null || fill === undefined || Number.isNaN(fill)) return null;
  return wordsOf(dtype === 'f32' ? new Float32Array([fill]) : new Float64Array([fill]));
}

/** Result of {@link classify}. */
export interface Classes {
  /** One code per cell, row-major. */
  codes: Uint8Array;
  /** Cells whose code is not Valid. */
  special: number;
  /** Raw bits of RawNaN cells in cell order, little-endian in the dtype's width. */
  rawNaN: Uint8Array;
}

/** Classify each value of a tile. */
export function classify(values: Float32Array | Float64Array, fill: Uint32Array | null): Classes {
  const n = values.length;
  const codes = new Uint8Array(n);
  const words = wordsOf(values);
  const wide = values instanceof Float64Array;
  const raw: number[] = [];
  let special = 0;
  for (let i = 0; i < n; i++) {
    const x = values[i];
    // A finite value that cannot be the fill value is valid, and its code is already 0 (Valid): one test a cell
    // (x - x is 0 for a finite x, NaN for an infinity or a NaN).
    if (fill === null && x - x === 0) continue;
    let c: number = Cell.Valid;
    if (fill !== null && words[wide ? 2 * i : i] === fill[0] && (!wide || words[2 * i + 1] === fill[1])) c = Cell.Fill;
    else if (x === Infinity) c = Cell.PosInf;
    else if (x === -Infinity) c = Cell.NegInf;
    else if (x !== x) {
      const canonical = wide ? words[2 * i] === 0 && words[2 * i + 1] === 0x7ff80000 : words[i] === 0x7fc00000;
      c = canonical ? Cell.NaN : Cell.RawNaN;
      if (!canonical) raw.push(i);
    }
    if (c !== Cell.Valid) special++;
    codes[i] = c;
  }
  const width = wide ? 8 : 4;
  const rawNaN = new Uint8Array(raw.length * width);
  const src = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
  raw.forEach((cell, k) => rawNaN.set(src.subarray(cell * width, cell * width + width), k * width));
  return { codes, special, rawNaN };
}

/**
 * Write the special cells into decoded values: fill, infinities, canonical
 * NaN and raw NaN bits (consumed in cell order from `rawNaN`).
 */
export function applyClasses(
  out: Float32Array | Float64Array,
  codes: Uint8Array,
  rawNaN: Uint8Array,
  fill: Uint32Array | null,
): void {
  const words = wordsOf(out);
  const wide = out instanceof Float64Array;
  const width = wide ? 8 : 4;
  const bytes = new Uint8Array(out.buffer, out.byteOffset, out.byteLength);
  let nextRaw = 0;
  for (let i = 0; i < codes.length; i++) {
    const c = codes[i];
    if (c === Cell.Valid) continue;
    if (c === Cell.Fill && fill !== null) {
      words[wide ? 2 * i : i] = fill[0];
      if (wide) words[2 * i + 1] = fill[1];
    } else if (c === Cell.PosInf) out[i] = Infinity;
    else if (c === Cell.NegInf) out[i] = -Infinity;
    else if (c === Cell.NaN) {
      if (wide) {
        words[2 * i] = 0;
        words[2 * i + 1] = 0x7ff80000;
      } else words[i] = 0x7fc00000;
    } else if (c === Cell.RawNaN) {
      bytes.set(rawNaN.subarray(nextRaw * width, nextRaw * width + width), i * width);
      nextRaw++;
    }
  }
}
