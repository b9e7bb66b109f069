/**
 * The binary columns of an index page (spec/FORMAT.md, section 7.3): one
 * MessagePack `bin` value holding a widths byte and then every per-tile
 * column of n_p entries, little-endian, back to back: byte lengths, kinds
 * and missing counts as unsigned LEB128 varints, CRCs as u32, recorded
 * errors as binary32 (or binary64 for a column holding a value that is not
 * a binary32 value, or no byte at all for a column of zeros). Writing
 * here, reading and checking too: columns that are not a bin, an entry
 * past their end, a varint that is not in its shortest form or runs over
 * 5 bytes, or bytes left over are refused with a message naming the column
 * and entry.
 */
import { FormatError } from '../errors.js';
import { ByteReader, ByteWriter, LENGTH_BYTES } from './bytes.js';

/** The stored columns of an index page, in their order; an optional `prefix` column follows them. */
export const PAGE_COLUMNS = ['length', 'crc', 'kind', 'missing', 'max_err', 'rmse', 'value_crc'] as const;
export type PageColumn = (typeof PAGE_COLUMNS)[number];

/** How each column is stored. */
export const COLUMN_TYPES: Record<PageColumn, 'varint' | 'u32' | 'error'> = {
  length: 'varint',
  crc: 'u32',
  kind: 'varint',
  missing: 'varint',
  max_err: 'error',
  rmse: 'error',
  value_crc: 'u32',
};

/** A tile's kind: 0 for an Exact payload, rank + 1 for a LowRank one. */
export function tileKind(method: number, rank: number): number {
  return method === 0 ? 0 : rank + 1;
}

/** Method and rank of a kind (the inverse of {@link tileKind}). */
export function kindParts(kind: number): { method: number; rank: number } {
  return kind === 0 ? { method: 0, rank: 0 } : { method: 1, rank: kind - 1 };
}

/** Width codes of the error columns in the columns' first byte: no entry (every figure 0), binary32, binary64. */
const ERROR_WIDTHS = [0, 4, 8] as const;

/** The width code of an error column: 0 when every value is 0, 1 when every value is a binary32 value, else 2. */
function errorWidth(values: readonly number[]): 0 | 1 | 2 {
  if (values.every((v) => v === 0)) return 0;
  return values.every((v) => Math.fround(v) === v) ? 1 : 2;
}

/**
 * The stored columns of a page (spec/FORMAT.md 7.3), one byte run: a widths
 * byte (bits 0-1: the width code of `max_err`, bits 2-3: that of `rmse`),
 * then each column of {@link PAGE_COLUMNS} in order, its entries back to
 * back. Varint and u32 columns hold integers in 0..2^32 - 1; an error
 * column takes no byte when every value is 0 (tiles decoded exactly),
 * binary32 entries when every value is a binary32 value (the writer rounds
 * errors up to one, spec/FORMAT.md 7.5), else binary64.
 */
export function columnsBytes(values: Record<PageColumn, readonly number[]>): Uint8Array {
  const tiles = values.length.length;
  // At most 5 + 4 + 5 + 5 + 8 + 8 + 4 bytes a tile, after the widths byte.
  const w = new ByteWriter(1 + 39 * tiles);
  const we = errorWidth(values.max_err);
  const wr = errorWidth(values.rmse);
  w.u8(we | (wr << 2));
  for (const c of PAGE_COLUMNS) {
    const type = COLUMN_TYPES[c];
    const width = c === 'max_err' ? we : wr;
    for (const v of values[c]) {
      if (type === 'varint') w.varint(v);
      else if (type === 'u32') w.u32(v);
      else if (width === 1) w.f32(v);
      else if (width === 2) w.f64(v);
    }
  }
  return w.finish();
}

/**
 * Read the stored columns of a page of `n` tiles; `bad` throws the caller's
 * error with the message it is given. Refused: a value that is not a `bin`;
 * a widths byte with bits 4-7 set or a width code of 3; an entry that runs
 * past the end; a varint that is not in its shortest form, runs over 5
 * bytes or holds 2^32 or more; bytes left after the last column.
 */
export function readColumns(raw: unknown, n: number, bad: (what: string) => never): Record<PageColumn, number[]> {
  if (!(raw instanceof Uint8Array)) return bad('columns are not a binary value');
  const r = new ByteReader(raw, 'columns', 0, 'columns offset');
  const out = {} as Record<PageColumn, number[]>;
  try {
    const widths = r.u8('widths byte');
    if (widths > 0x0f) return bad(`widths byte 0x${widths.toString(16)} has bits above bit 3 set`);
    const codes = { max_err: widths & 3, rmse: widths >> 2 };
    for (const c of ['max_err', 'rmse'] as const) if (codes[c] === 3) return bad(`widths byte 0x${widths.toString(16)} gives column '${c}' the unknown width code 3`);
    for (const c of PAGE_COLUMNS) {
      const type = COLUMN_TYPES[c];
      const col: number[] = new Array(n);
      for (let k = 0; k < n; k++) {
        const what = `column '${c}' entry ${k}`;
        if (type === 'varint') col[k] = r.varint(what, LENGTH_BYTES);
        else if (type === 'u32') col[k] = r.u32(what);
        else {
          const width = ERROR_WIDTHS[codes[c as 'max_err' | 'rmse']];
          col[k] = width === 0 ? 0 : width === 4 ? r.f32(what) : r.f64(what);
        }
      }
      out[c] = col;
    }
  } catch (e) {
    if (!(e instanceof FormatError)) throw e;
    return bad(e.message);
  }
  if (r.remaining !== 0) return bad(`columns have ${r.remaining} bytes left after the ${n} tiles' entries`);
  return out;
}
