/**
 * Types and format constants shared by the NetCDF classic reader
 * (`netcdf-read.ts`) and writer (`netcdf-write.ts`).
 *
 * The constants come from the NetCDF classic format specification (the BNF
 * grammar of the header in the NetCDF User's Guide, "File Format
 * Specifications"), quoted here from memory: the magic is 'C' 'D' 'F'
 * followed by a version byte (1 for the classic format, CDF-1; 2 for the
 * 64-bit-offset format, CDF-2); every integer is big-endian; list tags are
 * NC_DIMENSION = 0x0A, NC_VARIABLE = 0x0B, NC_ATTRIBUTE = 0x0C; the types
 * are NC_BYTE = 1 (signed 8-bit), NC_CHAR = 2, NC_SHORT = 3, NC_INT = 4,
 * NC_FLOAT = 5, NC_DOUBLE = 6.
 */

/** The six external types of the classic data model. */
export type NcType = 'byte' | 'char' | 'short' | 'int' | 'float' | 'double';

/** Numeric types an attribute may be given explicitly when writing. */
export type NcNumericType = Exclude<NcType, 'char'>;

/**
 * An attribute value: text (NC_CHAR, UTF-8), one number, or a list of
 * numbers (any numeric type; a one-element list reads back as a number).
 */
export type NcAttrValue = string | number | number[];

/** Attributes by name, in file order. */
export type NcAttrs = Record<string, NcAttrValue>;

/** One dimension. `size` of the unlimited dimension is the number of records. */
export interface NcDimension {
  name: string;
  size: number;
  unlimited: boolean;
}

/** One variable as described by the header (no data). */
export interface NcVariable {
  name: string;
  /** Dimension names, slowest-varying first. */
  dims: string[];
  /** Dimension sizes; the unlimited (record) dimension counts the records. */
  shape: number[];
  /** Stored (external) type. */
  type: NcType;
  /** Attributes, values as in {@link NcAttrValue}. */
  attrs: NcAttrs;
  /** The stored type of each attribute in `attrs`. */
  attrTypes: Record<string, NcType>;
  /** True when the first dimension is the unlimited one. */
  isRecord: boolean;
  /** File offset of the data (of the first record, for a record variable). */
  begin: number;
}

/** A parsed NetCDF classic or 64-bit-offset header. */
export interface NcFile {
  format: 'classic' | '64bit-offset';
  dims: NcDimension[];
  globalAttrs: NcAttrs;
  /** The stored type of each global attribute. */
  globalAttrTypes: Record<string, NcType>;
  variables: NcVariable[];
  /** Number of records (the unlimited dimension's size; 0 when there is none). */
  numRecords: number;
  /** Bytes from one record to the next (0 without record variables). */
  recordSize: number;
}

/** What {@link readNetcdfVariable} returns: one variable's physical values. */
export interface NcValues {
  /**
   * Row-major values of the selected hyperslab. Float32Array for unpacked
   * float variables and for unpacked byte and short variables (exact);
   * Float64Array for double, int and every packed variable.
   */
  values: Float32Array | Float64Array;
  dtype: 'f32' | 'f64';
  /** Shape of `values` (the variable's shape, or the hyperslab's count). */
  shape: number[];
  /** Dimension names, one per axis of `shape`. */
  dims: string[];
  /**
   * The value every missing cell holds in `values`, or null when there is
   * none. A fill that never occurs may still be reported (it is the value a
   * writer should declare as _FillValue).
   */
  fill: number | null;
  /** Where `fill` came from. */
  fillSource: '_FillValue' | 'missing_value' | 'default' | null;
  /** Cells of the selection equal to `fill` (NaN cells are not counted). */
  fillCount: number;
  /**
   * Cells that held another missing value (a second missing_value, or a
   * _FillValue/missing_value different from `fill`) and now hold `fill`.
   */
  remapped: number;
  /**
   * With the `mark` option: the physical value of each other missing value
   * (after `fill`), in order; cells holding the k-th (from 1) hold the quiet
   * NaN {@link missingMark}(k) instead of `fill`, so each comes back as
   * itself (see {@link unmark}). Empty without the option.
   */
  marks: number[];
  /** The variable's attributes as stored (see {@link physicalAttributes} for writing the values back). */
  attrs: NcAttrs;
  /** True when scale_factor/add_offset were applied. */
  unpacked: boolean;
  /** The stored type and the packing applied, for reports. */
  storedType: NcType;
  packing: { scale: number; offset: number } | null;
}

/** Type codes, as stored in the file. */
export const NC_TYPE_CODE: Record<NcType, number> = { byte: 1, char: 2, short: 3, int: 4, float: 5, double: 6 };

/** Type names by code (index 0 unused). */
export const NC_TYPE_BY_CODE: readonly (NcType | undefined)[] = [undefined, 'byte', 'char', 'short', 'int', 'float', 'double'];

/** Bytes per value of each type. */
export const NC_TYPE_SIZE: Record<NcType, 1 | 2 | 4 | 8> = { byte: 1, char: 1, short: 2, int: 4, float: 4, double: 8 };

/** List tags of the header grammar. */
export const NC_DIMENSION = 0x0a;
export const NC_VARIABLE = 0x0b;
export const NC_ATTRIBUTE = 0x0c;

/** numrecs value meaning "not known, count the records from the file length". */
export const NC_STREAMING = 0xffffffff;

/**
 * The netCDF library's default fill values (from memory of netcdf.h:
 * NC_FILL_BYTE -127, NC_FILL_CHAR 0, NC_FILL_SHORT -32767,
 * NC_FILL_INT -2147483647, NC_FILL_FLOAT and NC_FILL_DOUBLE
 * 9.9692099683868690e+36; the float one is the binary32 value 0x7CF00000).
 */
export const NC_DEFAULT_FILL: Record<NcType, number> = {
  byte: -127,
  char: 0,
  short: -32767,
  int: -2147483647,
  float: Math.fround(9.969209968386869e36),
  double: 9.969209968386869e36,
};

/** Smallest and largest value of each integer type (signed). */
export const NC_INT_RANGE: Record<'byte' | 'short' | 'int', [number, number]> = {
  byte: [-128, 127],
  short: [-32768, 32767],
  int: [-2147483648, 2147483647],
};

/** Rounds `n` up to a multiple of 4 (the format's alignment). */
export function pad4(n: number): number {
  return n + ((4 - (n % 4)) % 4);
}

/** Sets an own property, safely even for keys such as "__proto__" (names come from files). */
export function setOwn<T>(target: Record<string, T>, key: string, value: T): void {
  Object.defineProperty(target, key, { value, enumerable: true, writable: true, configurable: true });
}

/** Most missing values beside the fill that can be marked apart (see {@link missingMark}). */
export const MAX_MARKS = 255;
/** Bits of the quiet NaNs that mark the k-th other missing value: float32 0x7fd13000 + k, float64 0x7ffa1300_00000000 + k (our own choice). */
const MARK_F32 = 0x7fd13000;
const MARK_F64 = 0x7ffa130000000000n;

/** The k-th (1..{@link MAX_MARKS}) missing-value mark of a type, as bits: a quiet NaN with a payload of our own. */
export function missingMark(k: number, f32: boolean): number | bigint {
  return f32 ? MARK_F32 + k : MARK_F64 + BigInt(k);
}

/** Which mark (1..count) cell i of `values` holds, or 0 (for a few cells: it makes a view per call). */
export function markAt(values: Float32Array | Float64Array, i: number, count: number): number {
  if (!Number.isNaN(values[i])) return 0;
  const f32 = values instanceof Float32Array;
  return markOf(values, i, f32 ? new Uint32Array(values.buffer, values.byteOffset, values.length) : null, f32 ? null : new BigUint64Array(values.buffer, values.byteOffset, values.length), count);
}

/** Which mark (1..count) a NaN's bits are, or 0. */
function markOf(values: Float32Array | Float64Array, i: number, bits32: Uint32Array | null, bits64: BigUint64Array | null, count: number): number {
  const k = bits32 ? bits32[i] - MARK_F32 : Number(bits64![i] - MARK_F64);
  return k >= 1 && k <= count ? k : 0;
}

/** Set cell i of `values` to mark k (bit for bit). */
export function setMark(values: Float32Array | Float64Array, i: number, k: number): void {
  if (values instanceof Float32Array) new Uint32Array(values.buffer, values.byteOffset, values.length)[i] = MARK_F32 + k;
  else new BigUint64Array(values.buffer, values.byteOffset, values.length)[i] = MARK_F64 + BigInt(k);
}

/** True when `values` already hold a NaN with the bits of one of the first `count` marks. */
export function holdsMark(values: Float32Array | Float64Array, count: number): boolean {
  const b32 = values instanceof Float32Array ? new Uint32Array(values.buffer, values.byteOffset, values.length) : null;
  const b64 = b32 ? null : new BigUint64Array(values.buffer, values.byteOffset, values.length);
  for (let i = 0; i < values.length; i++) if (Number.isNaN(values[i]) && markOf(values, i, b32, b64, count) > 0) return true;
  return false;
}

/** Put the missing values back in place of their marks: the cells of mark k get marks[k - 1]. In place. */
export function unmark(values: Float32Array | Float64Array, marks: readonly number[]): void {
  if (marks.length === 0) return;
  const b32 = values instanceof Float32Array ? new Uint32Array(values.buffer, values.byteOffset, values.length) : null;
  const b64 = b32 ? null : new BigUint64Array(values.buffer, values.byteOffset, values.length);
  for (let i = 0; i < values.length; i++) {
    if (!Number.isNaN(values[i])) continue;
    const k = markOf(values, i, b32, b64, marks.length);
    if (k > 0) values[i] = marks[k - 1];
  }
}
