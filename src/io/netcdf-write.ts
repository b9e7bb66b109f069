/**
 * Writing NetCDF classic (CDF-1) and 64-bit-offset (CDF-2) files, from the
 * published NetCDF classic format specification (the header grammar in the
 * NetCDF User's Guide, "File Format Specifications"; recalled from memory):
 *
 *     netcdf_file = header data
 *     header      = magic numrecs dim_list gatt_list var_list
 *     magic       = 'C' 'D' 'F' VERSION          (1: classic, 2: 64-bit offset)
 *     dim_list    = ABSENT | NC_DIMENSION nelems [dim ...]
 *     dim         = name dim_length               (0 for the unlimited dimension)
 *     att_list    = ABSENT | NC_ATTRIBUTE nelems [attr ...]
 *     attr        = name nc_type nelems [values ...]   (padded to 4 bytes)
 *     var_list    = ABSENT | NC_VARIABLE nelems [var ...]
 *     var         = name nelems [dimid ...] vatt_list nc_type vsize begin
 *     name        = nelems namestring              (UTF-8, padded to 4 bytes)
 *     ABSENT      = ZERO ZERO
 *
 * Integers are big-endian; `begin` is 32-bit in CDF-1 and 64-bit in CDF-2.
 * Header padding is zero bytes; data padding is the variable's fill value.
 * The data of fixed-size variables follows the header in order; then come
 * the records, each holding one slab of every record variable in order,
 * each slab padded to 4 bytes, except that a lone record variable's slabs
 * are not padded. `vsize` is the padded size of the variable (of one slab,
 * for a record variable), or 2^32 - 1 when that does not fit in 32 bits.
 */

import { InputCode, InputError } from '../errors.js';
import {
  NC_ATTRIBUTE,
  NC_DEFAULT_FILL,
  NC_DIMENSION,
  NC_INT_RANGE,
  NC_TYPE_CODE,
  NC_TYPE_SIZE,
  NC_VARIABLE,
  pad4,
  type NcAttrs,
  type NcAttrValue,
  type NcType,
} from './netcdf-types.js';

/** Values of a variable to write; see {@link writeNetcdf} for which go with which type. */
export type NcWriteValues = Float32Array | Float64Array | Int8Array | Int16Array | Int32Array | Uint8Array | number[] | string[];

/** A variable to write. */
export interface NcWriteVariable {
  name: string;
  dims: string[];
  type: NcType;
  attrs: NcAttrs;
  /** Types of numeric attributes; see {@link writeNetcdf} for the defaults. */
  attrTypes?: Record<string, NcType>;
  values: NcWriteValues;
}

/** A file to write. The unlimited dimension's `size` is the number of records. */
export interface NcWriteFile {
  /** Default: classic, or 64-bit-offset when the offsets need it. */
  format?: 'classic' | '64bit-offset';
  dims: { name: string; size: number; unlimited?: boolean }[];
  globalAttrs: NcAttrs;
  globalAttrTypes?: Record<string, NcType>;
  variables: NcWriteVariable[];
  /**
   * Names of variables, dimensions and global attributes may be NetCDF-4
   * group paths, `GROUP/.../NAME` without a leading '/', each part a valid
   * name (a global attribute so named is an attribute of that group). Only for
   * the in-memory model of a NetCDF-4 file (src/io/hdf5-read.ts) and for
   * writing NetCDF-4: bytes written with such names are no valid classic file.
   */
  groupPaths?: boolean;
}

/** Where everything goes, from {@link planNetcdf}. */
export interface NcLayout {
  format: 'classic' | '64bit-offset';
  headerBytes: number;
  /** Data offset of each variable (of its first record, for record variables). */
  begins: number[];
  /** Bytes per record (0 without record variables). */
  recordSize: number;
  numRecords: number;
  totalBytes: number;
}

const MAX_NAME_BYTES = 256; // NC_MAX_NAME, from memory
const MAX_INT32 = 0x7fffffff;
/** Largest vsize that fits the 32-bit field; larger variables store 2^32 - 1 there. */
const VSIZE_LIMIT = 0xfffffffc;

function optionError(message: string): never {
  throw new InputError(InputCode.Option, `NetCDF writer: ${message}`);
}

const utf8 = new TextEncoder();

/**
 * Checks a NetCDF name (from memory of the NetCDF User's Guide): UTF-8 in
 * NFC, first character a letter, digit or underscore, no control
 * characters or '/', no trailing spaces, at most 256 bytes.
 */
function checkName(name: string, what: string, paths = false): Uint8Array {
  if (paths && typeof name === 'string' && name.includes('/')) {
    for (const part of name.split('/')) checkName(part, `${what} '${name}': group path part`);
    return utf8.encode(name);
  }
  if (typeof name !== 'string' || name.length === 0) optionError(`${what} needs a non-empty name`);
  const bytes = utf8.encode(name);
  const ok =
    /^[\p{L}\p{N}_]/u.test(name) &&
    !/[\u0000-\u001f\u007f/]/u.test(name) &&
    !/\s$/u.test(name) &&
    name.normalize('NFC') === name &&
    bytes.length <= MAX_NAME_BYTES;
  if (!ok) {
    optionError(
      `${what} name ${JSON.stringify(name)} is not a valid NetCDF name (it must start with a letter, digit or '_', ` +
        `hold no control characters or '/', not end in a space, be NFC-normalized and take at most ${MAX_NAME_BYTES} bytes)`,
    );
  }
  return bytes;
}

/** A growable big-endian byte writer for the header. */
class HeaderWriter {
  private bytes = new Uint8Array(1024);
  private view = new DataView(this.bytes.buffer);
  length = 0;

  private room(n: number): void {
    if (this.length + n <= this.bytes.length) return;
    let size = this.bytes.length * 2;
    while (size < this.length + n) size *= 2;
    const next = new Uint8Array(size); // doubling keeps appends amortized O(1)
    next.set(this.bytes.subarray(0, this.length));
    this.bytes = next;
    this.view = new DataView(next.buffer);
  }
  u32(x: number): void {
    this.room(4);
    this.view.setUint32(this.length, x);
    this.length += 4;
  }
  u64(x: number): void {
    this.room(8);
    this.view.setBigUint64(this.length, BigInt(x));
    this.length += 8;
  }
  raw(b: Uint8Array): void {
    this.room(b.length);
    this.bytes.set(b, this.length);
    this.length += b.length;
  }
  pad(): void {
    const n = pad4(this.length) - this.length;
    this.room(n);
    this.bytes.fill(0, this.length, this.length + n);
    this.length += n;
  }
  name(b: Uint8Array): void {
    this.u32(b.length);
    this.raw(b);
    this.pad();
  }
  result(): Uint8Array {
    return this.bytes.subarray(0, this.length);
  }
}

/** Writes `values` of numeric `type` big-endian into `view` at `off`. */
function encodeNumbers(view: DataView, off: number, type: NcType, values: ArrayLike<number>): void {
  const n = values.length;
  switch (type) {
    case 'byte':
      for (let i = 0; i < n; i++) view.setInt8(off + i, values[i]);
      break;
    case 'short':
      for (let i = 0; i < n; i++) view.setInt16(off + 2 * i, values[i]);
      break;
    case 'int':
      for (let i = 0; i < n; i++) view.setInt32(off + 4 * i, values[i]);
      break;
    case 'float':
      for (let i = 0; i < n; i++) view.setFloat32(off + 4 * i, values[i]);
      break;
    case 'double':
      for (let i = 0; i < n; i++) view.setFloat64(off + 8 * i, values[i]);
      break;
    case 'char':
      for (let i = 0; i < n; i++) view.setUint8(off + i, values[i]);
      break;
  }
}

/** Refuses numbers that `type` cannot hold (integers out of range or with fractions). */
function checkNumbers(values: ArrayLike<number>, type: NcType, what: string): void {
  if (type === 'float' || type === 'double') {
    for (let i = 0; i < values.length; i++) if (typeof values[i] !== 'number') optionError(`${what}: ${String(values[i])} is not a number`);
    return;
  }
  const [lo, hi] = type === 'char' ? [0, 255] : NC_INT_RANGE[type];
  for (let i = 0; i < values.length; i++) {
    const x = values[i];
    if (!Number.isInteger(x) || x < lo || x > hi) optionError(`${what}: ${x} does not fit the NetCDF type ${type} (${lo}..${hi})`);
  }
}

/** Attribute names that take the variable's own type by default (NUG and CF, from memory). */
const VAR_TYPED_ATTRS = new Set(['_FillValue', 'missing_value', 'valid_min', 'valid_max', 'valid_range']);

function attrType(key: string, value: NcAttrValue, types: Record<string, NcType> | undefined, varType: NcType | null, what: string): NcType {
  const given = types && Object.prototype.hasOwnProperty.call(types, key) ? types[key] : undefined;
  if (typeof value === 'string') {
    if (given !== undefined && given !== 'char') optionError(`${what} attribute '${key}' is text but its type is given as ${given}`);
    return 'char';
  }
  if (given !== undefined) {
    if (!(given in NC_TYPE_SIZE) || given === 'char') optionError(`${what} attribute '${key}' is numeric but its type is given as ${String(given)}`);
    return given;
  }
  return varType !== null && varType !== 'char' && VAR_TYPED_ATTRS.has(key) ? varType : 'double';
}

function writeAttrs(w: HeaderWriter, attrs: NcAttrs, types: Record<string, NcType> | undefined, varType: NcType | null, what: string, paths = false): void {
  if (attrs === null || typeof attrs !== 'object') optionError(`${what} attributes must be an object`);
  const entries = Object.entries(attrs);
  if (entries.length === 0) {
    w.u32(0); // ABSENT
    w.u32(0);
    return;
  }
  w.u32(NC_ATTRIBUTE);
  w.u32(entries.length);
  for (const [key, value] of entries) {
    w.name(checkName(key, `${what} attribute`, paths));
    const type = attrType(key, value, types, varType, what);
    w.u32(NC_TYPE_CODE[type]);
    if (typeof value === 'string') {
      const b = utf8.encode(value);
      w.u32(b.length);
      w.raw(b);
    } else {
      const list = Array.isArray(value) ? value : [value];
      if (!list.every((x) => typeof x === 'number')) optionError(`${what} attribute '${key}' must be text, a number or a list of numbers`);
      checkNumbers(list, type, `${what} attribute '${key}'`);
      const b = new Uint8Array(list.length * NC_TYPE_SIZE[type]);
      encodeNumbers(new DataView(b.buffer), 0, type, list);
      w.u32(list.length);
      w.raw(b);
    }
    w.pad();
  }
}

interface Checked {
  dimIds: number[][];
  slabs: number[]; // bytes of one record's slab, or of the whole fixed variable (unpadded)
  slabCounts: number[]; // values in that slab
  isRecord: boolean[];
  numRecords: number;
}

function checkStructure(file: Omit<NcWriteFile, 'variables'> & { variables: Omit<NcWriteVariable, 'values'>[] }): Checked {
  if (file.format !== undefined && file.format !== 'classic' && file.format !== '64bit-offset') {
    optionError(`format must be 'classic' or '64bit-offset', got ${JSON.stringify(file.format)}`);
  }
  const dimNames = new Map<string, number>();
  let numRecords = 0;
  let unlimited = -1;
  for (const [i, d] of file.dims.entries()) {
    checkName(d.name, 'dimension', file.groupPaths === true);
    if (dimNames.has(d.name)) optionError(`two dimensions named '${d.name}'`);
    dimNames.set(d.name, i);
    const lo = d.unlimited ? 0 : 1;
    if (!Number.isInteger(d.size) || d.size < lo || d.size > MAX_INT32) {
      optionError(`dimension '${d.name}' has size ${d.size}; sizes are integers in ${lo}..${MAX_INT32}${d.unlimited ? '' : ' (0 would mean unlimited)'}`);
    }
    if (d.unlimited) {
      if (unlimited >= 0) optionError(`only one dimension may be unlimited ('${file.dims[unlimited].name}' and '${d.name}' are)`);
      unlimited = i;
      numRecords = d.size;
    }
  }
  const out: Checked = { dimIds: [], slabs: [], slabCounts: [], isRecord: [], numRecords };
  const varNames = new Set<string>();
  for (const v of file.variables) {
    checkName(v.name, 'variable', file.groupPaths === true);
    if (varNames.has(v.name)) optionError(`two variables named '${v.name}'`);
    varNames.add(v.name);
    if (!(v.type in NC_TYPE_SIZE)) optionError(`variable '${v.name}' has unknown type ${JSON.stringify(v.type)}`);
    const ids = v.dims.map((dn) => dimNames.get(dn) ?? optionError(`variable '${v.name}' uses dimension '${dn}', which is not defined`));
    ids.forEach((id, k) => {
      if (k > 0 && id === unlimited) optionError(`variable '${v.name}': the unlimited dimension '${dn(file, id)}' may only be the first`);
    });
    const isRecord = ids.length > 0 && ids[0] === unlimited;
    const count = (isRecord ? ids.slice(1) : ids).reduce((a, id) => a * file.dims[id].size, 1);
    out.dimIds.push(ids);
    out.isRecord.push(isRecord);
    out.slabCounts.push(count);
    out.slabs.push(count * NC_TYPE_SIZE[v.type]);
  }
  return out;
}

function dn(file: { dims: { name: string }[] }, id: number): string {
  return file.dims[id].name;
}

function buildHeader(file: Parameters<typeof checkStructure>[0], c: Checked, format: NcLayout['format'], begins: number[]): Uint8Array {
  const w = new HeaderWriter();
  w.raw(Uint8Array.of(0x43, 0x44, 0x46, format === 'classic' ? 1 : 2)); // 'CDF' + version
  w.u32(c.numRecords);
  if (file.dims.length === 0) {
    w.u32(0);
    w.u32(0);
  } else {
    w.u32(NC_DIMENSION);
    w.u32(file.dims.length);
    for (const d of file.dims) {
      w.name(utf8.encode(d.name));
      w.u32(d.unlimited ? 0 : d.size);
    }
  }
  writeAttrs(w, file.globalAttrs, file.globalAttrTypes, null, 'global', file.groupPaths === true);
  if (file.variables.length === 0) {
    w.u32(0);
    w.u32(0);
  } else {
    w.u32(NC_VARIABLE);
    w.u32(file.variables.length);
    for (const [i, v] of file.variables.entries()) {
      w.name(utf8.encode(v.name));
      w.u32(c.dimIds[i].length);
      for (const id of c.dimIds[i]) w.u32(id);
      writeAttrs(w, v.attrs, v.attrTypes, v.type, `variable '${v.name}'`);
      w.u32(NC_TYPE_CODE[v.type]);
      const vsize = pad4(c.slabs[i]);
      w.u32(vsize > VSIZE_LIMIT ? 0xffffffff : vsize);
      if (format === 'classic') w.u32(begins[i]);
      else w.u64(begins[i]);
    }
  }
  return w.result();
}

/** Offsets of every variable's data, given the header size. */
function place(c: Checked, headerBytes: number): { begins: number[]; recordSize: number; total: number } {
  const begins: number[] = new Array<number>(c.slabs.length).fill(0);
  let at = headerBytes;
  for (let i = 0; i < c.slabs.length; i++) {
    if (c.isRecord[i]) continue;
    begins[i] = at;
    at += pad4(c.slabs[i]);
  }
  const records = c.isRecord.map((r, i) => (r ? i : -1)).filter((i) => i >= 0);
  const recordSize = records.length === 1 ? c.slabs[records[0]] : records.reduce((s, i) => s + pad4(c.slabs[i]), 0);
  let r = at;
  for (const i of records) {
    begins[i] = r;
    r += pad4(c.slabs[i]);
  }
  return { begins, recordSize, total: at + recordSize * c.numRecords };
}

/**
 * Size limits of the two formats (from memory of the format spec's notes
 * on large files): in CDF-1 every begin must fit a signed 32-bit integer
 * and each variable but the last must take under 2^31 bytes; in CDF-2 each
 * variable but the last must take at most 2^32 - 4 bytes. "The last" is the
 * last fixed-size variable when there are no record variables, else the
 * last record variable.
 */
function fits(format: NcLayout['format'], c: Checked, begins: number[]): boolean {
  const records = c.isRecord.some((r) => r);
  const order = c.slabs.map((_, i) => i).filter((i) => c.isRecord[i] === records);
  const last = order.length ? order[order.length - 1] : -1;
  for (let i = 0; i < c.slabs.length; i++) {
    if (format === 'classic' && begins[i] > MAX_INT32) return false;
    if (i === last) continue;
    if (format === 'classic' && pad4(c.slabs[i]) > MAX_INT32 - 3) return false;
    if (format === '64bit-offset' && pad4(c.slabs[i]) > VSIZE_LIMIT) return false;
  }
  return true;
}

/**
 * Works out the layout of a file without its values: the format (the one
 * asked for, else classic, else 64-bit-offset when classic cannot hold the
 * offsets), header size and every variable's offset. Throws InputError
 * (Option) for invalid names, sizes and structure, and when the data does
 * not fit the format.
 */
export function planNetcdf(file: Parameters<typeof checkStructure>[0]): NcLayout {
  return plan(file).layout;
}

/**
 * The header a file of these variables would have, and its layout, without
 * its values: the model of a NetCDF-4 file whose values are read later
 * (src/io/hdf5-read.ts) gets the same header as when written whole.
 */
export function netcdfHeader(file: Parameters<typeof checkStructure>[0]): { header: Uint8Array; layout: NcLayout } {
  const { layout, c } = plan(file);
  return { header: buildHeader(file, c, layout.format, layout.begins), layout };
}

function plan(file: Parameters<typeof checkStructure>[0]): { layout: NcLayout; c: Checked } {
  const c = checkStructure(file);
  const tryFormat = (format: NcLayout['format']): NcLayout | null => {
    const probe = buildHeader(file, c, format, new Array<number>(c.slabs.length).fill(0));
    const { begins, recordSize, total } = place(c, probe.length);
    if (!fits(format, c, begins)) return null;
    return { format, headerBytes: probe.length, begins, recordSize, numRecords: c.numRecords, totalBytes: total };
  };
  const formats: NcLayout['format'][] = file.format ? [file.format] : ['classic', '64bit-offset'];
  for (const f of formats) {
    const layout = tryFormat(f);
    if (layout) return { layout, c };
  }
  return optionError(
    file.format === 'classic'
      ? 'the variables are too large for the classic format; ask for 64bit-offset'
      : 'the variables are too large for the 64-bit-offset format (a variable other than the last exceeds 2^32 - 4 bytes)',
  );
}

/** The bytes that pad a slab: the variable's fill value repeated (the format spec, from memory). */
function padBytes(v: NcWriteVariable): Uint8Array {
  const size = NC_TYPE_SIZE[v.type];
  const out = new Uint8Array(4);
  const fv = v.attrs._FillValue;
  let fill = typeof fv === 'number' ? fv : Array.isArray(fv) && typeof fv[0] === 'number' ? fv[0] : NC_DEFAULT_FILL[v.type];
  if (v.type === 'char' && typeof fv === 'string') fill = fv.length ? fv.charCodeAt(0) & 0xff : 0;
  const view = new DataView(out.buffer);
  for (let at = 0; at < 4; at += size) encodeNumbers(view, at, v.type, [fill]);
  return out;
}

/** The variable's values as numbers of its type, checked. */
function numbersOf(v: NcWriteVariable, want: number, rowLength: number): ArrayLike<number> {
  const what = `variable '${v.name}'`;
  let values: ArrayLike<number>;
  const vals = v.values;
  if (v.type === 'char') {
    if (vals instanceof Uint8Array) values = vals;
    else if (Array.isArray(vals) && vals.every((s) => typeof s === 'string')) {
      const row = rowLength;
      const out = new Uint8Array(want);
      (vals as string[]).forEach((s, i) => {
        const b = utf8.encode(s);
        if (b.length > row) optionError(`${what}: text ${JSON.stringify(s)} takes ${b.length} bytes, more than the ${row} of the last dimension`);
        out.set(b, i * row);
      });
      if (vals.length * row !== want) optionError(`${what} needs ${row === 0 ? 0 : want / row} strings, got ${vals.length}`);
      values = out;
    } else return optionError(`${what} is char: pass a Uint8Array of bytes or an array of strings`);
  } else {
    const ok: Record<NcType, (x: unknown) => boolean> = {
      byte: (x) => x instanceof Int8Array || Array.isArray(x),
      short: (x) => x instanceof Int16Array || Array.isArray(x),
      int: (x) => x instanceof Int32Array || Array.isArray(x),
      float: (x) => x instanceof Float32Array,
      double: (x) => x instanceof Float64Array || x instanceof Float32Array,
      char: () => false,
    };
    if (!ok[v.type](vals)) {
      const hint = v.type === 'float' ? 'a Float32Array (round float64 values yourself if that is meant)' : v.type === 'double' ? 'a Float64Array or Float32Array' : `an ${v.type === 'byte' ? 'Int8Array' : v.type === 'short' ? 'Int16Array' : 'Int32Array'} or an array of integers`;
      optionError(`${what} is ${v.type}: pass ${hint}`);
    }
    values = vals as ArrayLike<number>;
    if (Array.isArray(vals)) checkNumbers(values, v.type, what);
  }
  if (values.length !== want) optionError(`${what} of dimensions (${v.dims.join(', ')}) needs ${want} values, got ${values.length}`);
  return values;
}


/**
 * Writes a NetCDF classic (CDF-1) file, or 64-bit-offset (CDF-2) when asked
 * or when the offsets need it, with its dimensions (at most one unlimited:
 * its `size` is the number of records, and record variables are
 * interleaved per record), global attributes, variables and their
 * attributes. Values, row-major: float takes a Float32Array; double a
 * Float64Array or Float32Array; byte, short, int an Int8Array, Int16Array,
 * Int32Array or an array of integers in range; char a Uint8Array or an
 * array of strings, one per row of the last dimension (zero-padded).
 * Attributes: text is NC_CHAR (UTF-8); numbers are NC_DOUBLE unless
 * `attrTypes` says otherwise, except that _FillValue, missing_value,
 * valid_min, valid_max and valid_range take the variable's type. Throws
 * InputError (Option) for anything the format cannot hold.
 */
export function writeNetcdf(file: NcWriteFile): Uint8Array {
  if (file === null || typeof file !== 'object' || !Array.isArray(file.dims) || !Array.isArray(file.variables)) {
    optionError('writeNetcdf needs { dims, globalAttrs, variables }');
  }
  const { layout, c } = plan(file);
  const values = file.variables.map((v, i) => {
    const ids = c.dimIds[i];
    const rowLength = ids.length ? file.dims[ids[ids.length - 1]].size : 1;
    return numbersOf(v, c.slabCounts[i] * (c.isRecord[i] ? c.numRecords : 1), rowLength);
  });
  const header = buildHeader(file, c, layout.format, layout.begins);
  // Internal assertion: both passes lay out the same header, so no input reaches this.
  if (header.length !== layout.headerBytes) throw new Error('NetCDF writer: header size changed between passes');
  let out: Uint8Array;
  try {
    out = new Uint8Array(layout.totalBytes);
  } catch {
    return optionError(`the file would take ${layout.totalBytes} bytes, more than can be built in memory here`);
  }
  out.set(header, 0);
  const view = new DataView(out.buffer);
  const records = c.isRecord.filter((r) => r).length;
  for (const [i, v] of file.variables.entries()) {
    const size = NC_TYPE_SIZE[v.type];
    const slab = c.slabCounts[i];
    const pad = records === 1 && c.isRecord[i] ? 0 : pad4(c.slabs[i]) - c.slabs[i];
    const fill = pad > 0 ? padBytes(v) : null;
    const slabs = c.isRecord[i] ? c.numRecords : 1;
    for (let r = 0; r < slabs; r++) {
      const off = layout.begins[i] + r * layout.recordSize;
      const all = values[i];
      const part = ArrayBuffer.isView(all) ? (all as Float64Array).subarray(r * slab, (r + 1) * slab) : Array.prototype.slice.call(all, r * slab, (r + 1) * slab);
      encodeNumbers(view, off, v.type, part);
      if (fill) out.set(fill.subarray(0, pad), off + slab * size);
    }
  }
  return out;
}
