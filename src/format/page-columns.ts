/**
 * The binary columns of an index page (spec/FORMAT.md, section 7.3): each
 * per-tile column is one MessagePack `bin` value holding n_p entries,
 * little-endian: byte lengths, kinds and missing counts as unsigned LEB128
 * varints, CRCs as u32, recorded errors as binary32 (or binary64 for a
 * column holding a value that is not a binary32 value, or no byte at all
 * for a column of zeros). Writing here, reading
 * and checking too: a column that is not a bin, has the wrong length,
 * holds a varint that is not in its shortest form or runs over 5 bytes, or
 * has bytes left over is refused with a message naming the column.
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

/**
 * One column in its stored form. Varint columns hold integers in 0..2^32 - 1,
 * u32 columns likewise; an error column is empty when every value is 0
 * (tiles decoded exactly), binary32 when every value is a binary32 value
 * (the writer rounds errors up to one, spec/FORMAT.md 7.5), else binary64.
 */
export function columnBytes(type: 'varint' | 'u32' | 'error', values: readonly number[]): Uint8Array {
  const w = new ByteWriter(8 * values.length);
  if (type === 'varint') for (const v of values) w.varint(v);
  else if (type === 'u32') for (const v of values) w.u32(v);
  else if (values.every((v) => v === 0)) return new Uint8Array(0);
  else if (values.every((v) => Math.fround(v) === v)) for (const v of values) w.f32(v);
  else for (const v of values) w.f64(v);
  return w.finish();
}

/**
 * Read column `name` of `n` entries from its stored value; `bad` throws the
 * caller's error with the message it is given.
 */
export function readColumn(raw: unknown, name: PageColumn, n: number, bad: (what: string) => never): number[] {
  if (!(raw instanceof Uint8Array)) return bad(`column '${name}' is not a binary value`);
  const type = COLUMN_TYPES[name];
  const width = type === 'u32' ? [4] : type === 'error' ? [0, 4, 8] : null;
  if (width !== null && !width.some((w) => raw.length === w * n)) {
    return bad(`column '${name}' holds ${raw.length} bytes, not ${width.map((w) => w * n).join(', ').replace(/, (\d+)$/, ' or $1')} for ${n} tiles`);
  }
  const out: number[] = new Array(n);
  const view = new DataView(raw.buffer, raw.byteOffset, raw.byteLength);
  if (type === 'u32') for (let k = 0; k < n; k++) out[k] = view.getUint32(4 * k, true);
  else if (type === 'error' && raw.length === 0) out.fill(0);
  else if (type === 'error' && raw.length === 4 * n) for (let k = 0; k < n; k++) out[k] = view.getFloat32(4 * k, true);
  else if (type === 'error') for (let k = 0; k < n; k++) out[k] = view.getFloat64(8 * k, true);
  else {
    const r = new ByteReader(raw, `column '${name}'`, 0, 'column offset');
    try {
      for (let k = 0; k < n; k++) out[k] = r.varint(`varint ${k}`, LENGTH_BYTES);
    } catch (e) {
      if (!(e instanceof FormatError)) throw e;
      return bad(e.message);
    }
    if (r.remaining !== 0) return bad(`column '${name}' has ${r.remaining} bytes left after its ${n} varints`);
  }
  return out;
}
