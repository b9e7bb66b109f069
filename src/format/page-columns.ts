/**
 * The binary columns of an index page (spec/FORMAT.md, section 7.3): one
 * MessagePack `bin` value holding a widths byte and then every per-tile
 * column of n_p entries, little-endian, back to back: byte lengths, kinds
 * and missing counts as unsigned LEB128 varints, CRCs as u32, recorded
 * errors as u16 shares of the field's tolerance where every error of the
 * column is within it, else binary32 (or binary64 for a column holding a
 * value that is not a binary32 value), or no byte at all for a column of
 * zeros. Writing
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

/** Width codes of the error columns in the columns' first byte: no entry (every figure 0), binary32, binary64, a u16 share of the tolerance. */
const ERROR_WIDTHS = [0, 4, 8, 2] as const;

/** The denominator of a share of the tolerance (width code 3). */
export const SHARE_ONE = 65535;

/**
 * The error a share code stands for (spec/FORMAT.md 7.3, width code 3):
 * tol x (code / 65535), two binary64 operations each rounded to nearest, in
 * that order, so that code 65535 gives tol itself and larger codes never
 * give smaller errors.
 */
export function shareValue(code: number, tol: number): number {
  return tol * (code / SHARE_ONE);
}

/** The smallest share code whose value is at least `x` (0 <= x <= tol, tol positive and finite). */
export function shareCode(x: number, tol: number): number {
  let c = Math.min(SHARE_ONE, Math.max(0, Math.ceil((x / tol) * SHARE_ONE)));
  while (c > 0 && shareValue(c - 1, tol) >= x) c--;
  while (shareValue(c, tol) < x) c++;
  return c;
}

/**
 * Recorded errors of a page's column (spec/FORMAT.md 7.3 and 7.5), from the
 * errors measured: rounded up to a share of the field's tolerance `tol`
 * (width code 3, 2 bytes an entry) when every value is at most `tol` and
 * `tol` is positive and finite, else each value rounded up to binary32 by
 * `up32` (binary64 where that leaves it unchanged: width codes 1 and 2);
 * width code 0 when every value is 0. Returns the width code and the values
 * a reader will read.
 */
export function recordErrors(measured: readonly number[], tol: number, up32: (x: number) => number): { code: 0 | 1 | 2 | 3; values: number[] } {
  if (measured.every((v) => v === 0)) return { code: 0, values: measured.map(() => 0) };
  if (tol > 0 && Number.isFinite(tol) && measured.every((v) => v <= tol)) return { code: 3, values: measured.map((v) => shareValue(shareCode(v, tol), tol)) };
  const values = measured.map(up32);
  return { code: exactWidth(values) === 1 ? 1 : 2, values };
}

/** The width code that stores every value of an error column exactly as a number: 0 (all zero), 1 (binary32) or 2 (binary64). */
export function exactWidth(values: readonly number[]): 0 | 1 | 2 {
  if (values.every((v) => v === 0)) return 0;
  return values.every((v) => Math.fround(v) === v) ? 1 : 2;
}

/**
 * The stored columns of a page (spec/FORMAT.md 7.3), one byte run: a widths
 * byte (bits 0-1: the width code of `max_err`, bits 2-3: that of `rmse`),
 * then each column of {@link PAGE_COLUMNS} in order, its entries back to
 * back. Varint and u32 columns hold integers in 0..2^32 - 1; each error
 * column in the width `widths` gives it (default: {@link exactWidth}, which
 * stores the values as they are): no byte, binary32, binary64, or (code 3)
 * the u16 share code of each value in the field's tolerance `tol`, whose
 * values must then be share values ({@link recordErrors} makes them).
 */
export function columnsBytes(values: Record<PageColumn, readonly number[]>, widths: { max_err: number; rmse: number } = { max_err: exactWidth(values.max_err), rmse: exactWidth(values.rmse) }, tol = 0): Uint8Array {
  const tiles = values.length.length;
  // At most 5 + 4 + 5 + 5 + 8 + 8 + 4 bytes a tile, after the widths byte.
  const w = new ByteWriter(1 + 39 * tiles);
  w.u8(widths.max_err | (widths.rmse << 2));
  for (const c of PAGE_COLUMNS) {
    const type = COLUMN_TYPES[c];
    const width = c === 'max_err' ? widths.max_err : widths.rmse;
    for (const v of values[c]) {
      if (type === 'varint') w.varint(v);
      else if (type === 'u32') w.u32(v);
      else if (width === 1) w.f32(v);
      else if (width === 2) w.f64(v);
      else if (width === 3) w.u16(shareCode(v, tol));
    }
  }
  return w.finish();
}

/**
 * Read the stored columns of a page of `n` tiles; `bad` throws the caller's
 * error with the message it is given. Refused: a value that is not a `bin`;
 * a widths byte with bits 4-7 set, or width code 3 (shares) where the
 * field's tolerance `tol` is 0; an entry that runs
 * past the end; a varint that is not in its shortest form, runs over 5
 * bytes or holds 2^32 or more; bytes left after the last column.
 */
export function readColumns(raw: unknown, n: number, tol: number, bad: (what: string) => never): Record<PageColumn, number[]> {
  if (!(raw instanceof Uint8Array)) return bad('columns are not a binary value');
  const r = new ByteReader(raw, 'columns', 0, 'columns offset');
  const out = {} as Record<PageColumn, number[]>;
  try {
    const widths = r.u8('widths byte');
    if (widths > 0x0f) return bad(`widths byte 0x${widths.toString(16)} has bits above bit 3 set`);
    const codes = { max_err: widths & 3, rmse: widths >> 2 };
    const shares = tol > 0 && Number.isFinite(tol);
    for (const c of ['max_err', 'rmse'] as const) if (codes[c] === 3 && !shares) return bad(`widths byte 0x${widths.toString(16)} gives column '${c}' width code 3 (shares of the tolerance) in a field whose tolerance is ${tol}`);
    for (const c of PAGE_COLUMNS) {
      const type = COLUMN_TYPES[c];
      const col: number[] = new Array(n);
      for (let k = 0; k < n; k++) {
        const what = `column '${c}' entry ${k}`;
        if (type === 'varint') col[k] = r.varint(what, LENGTH_BYTES);
        else if (type === 'u32') col[k] = r.u32(what);
        else {
          const width = ERROR_WIDTHS[codes[c as 'max_err' | 'rmse']];
          col[k] = width === 0 ? 0 : width === 4 ? r.f32(what) : width === 8 ? r.f64(what) : shareValue(r.u16(what), tol);
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
