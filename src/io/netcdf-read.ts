/**
 * Reading NetCDF classic (CDF-1) and 64-bit-offset (CDF-2) files from bytes.
 *
 * The header is parsed by netcdfjs (a reference reader of these two
 * formats), then converted and checked here. The values are read here, not
 * by netcdfjs, because netcdfjs
 *  - returns every value as a boxed JavaScript number in a plain array
 *    (8 to 16 bytes per value, and slow for N-D fields) and has no way to
 *    read part of a variable;
 *  - returns a record variable as one nested array per record;
 *  - reads NC_BYTE as unsigned (the format defines it as signed 8-bit),
 *    in variables and in attributes;
 *  - steps from record to record by the sum of the header's vsize fields,
 *    which is wrong in the format's special case of a single record variable
 *    of type byte, char or short, whose records are not padded to 4 bytes;
 *  - decodes names and text attributes one byte per character, so UTF-8 text
 *    comes out garbled (recovered here from the low byte of each character).
 * Missing values and packing follow the CF conventions; see
 * {@link readNetcdfVariable}.
 */

import { NetCDFReader, type Attribute, type Header } from 'netcdfjs';
import { InputCode, InputError } from '../errors.js';
import {
  holdsMark,
  MAX_MARKS,
  NC_DEFAULT_FILL,
  NC_INT_RANGE,
  NC_STREAMING,
  NC_TYPE_SIZE,
  pad4,
  setMark,
  setOwn,
  type NcAttrs,
  type NcAttrValue,
  type NcDimension,
  type NcFile,
  type NcType,
  type NcValues,
  type NcVariable,
} from './netcdf-types.js';

export type { NcAttrs, NcAttrValue, NcDimension, NcFile, NcType, NcValues, NcVariable } from './netcdf-types.js';

/** Largest header accepted, in bytes (16 MiB; real headers take kilobytes). */
export const MAX_NETCDF_HEADER_BYTES = 16 << 20;

/** Fill used for packed variables whose unpacked _FillValue cannot serve (see {@link readNetcdfVariable}). */
export const PACKED_FALLBACK_FILL = -9.99e33;

/**
 * Random access to the bytes of a NetCDF file, read synchronously (the
 * encoder asks for bands from inside its synchronous tile loop): the whole
 * file in memory ({@link bytesSource}) or a file read with positioned reads
 * (src/io/netcdf-file.ts), so a variable larger than memory can be read a
 * band of rows at a time.
 */
export interface NcBytes {
  /** The file's length in bytes. */
  readonly size: number;
  /** Exactly `length` bytes from `offset` (a range within `size`); a view that must not be kept past the next read. */
  read(offset: number, length: number): Uint8Array;
}

/** The bytes of a whole file in memory as an {@link NcBytes}. */
export function bytesSource(bytes: Uint8Array): NcBytes {
  return { size: bytes.length, read: (offset, length) => bytes.subarray(offset, offset + length) };
}

function sourceOf(bytes: Uint8Array | NcBytes): NcBytes {
  return bytes instanceof Uint8Array ? bytesSource(bytes) : bytes;
}

/** Largest single read of values, so one band never needs one huge buffer beyond its values. */
const MAX_READ = 8 << 20;

/** The HDF5 signature, "\x89HDF\r\n\x1a\n", which opens every NetCDF-4 file. */
const HDF5_SIGNATURE = [0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a];

function fileError(name: string, message: string): never {
  throw new InputError(InputCode.File, `${name}: ${message}`);
}

/** True when the HDF5 signature sits at offset 0, 512, 1024, 2048, ... (HDF5 allows a user block before it). */
function hasHdf5Signature(src: NcBytes): boolean {
  for (let at = 0; at + 8 <= src.size && at <= 1 << 20; at = at === 0 ? 512 : at * 2) {
    const head = src.read(at, 8);
    if (HDF5_SIGNATURE.every((b, i) => head[i] === b)) return true;
  }
  return false;
}

/** Refuses everything but 'CDF' + version 1 or 2, with a message saying what the bytes are. */
function checkMagic(src: NcBytes, name: string): void {
  if (hasHdf5Signature(src)) {
    fileError(
      name,
      'this is a NetCDF-4 (HDF5) file; only the NetCDF classic and 64-bit-offset formats are read ' +
        '(convert it first, e.g. with nccopy -k classic or nccopy -k 64-bit-offset)',
    );
  }
  const bytes = src.read(0, Math.min(src.size, 4));
  const magic = [0x43, 0x44, 0x46]; // 'C' 'D' 'F'
  const head = Math.min(bytes.length, 3);
  if (bytes.length === 0) fileError(name, 'the file is empty, not a NetCDF file');
  if (!magic.slice(0, head).every((b, i) => bytes[i] === b)) {
    fileError(name, "not a NetCDF file (a NetCDF classic file starts with the bytes 'CDF')");
  }
  if (bytes.length < 4) fileError(name, `the file is only ${bytes.length} bytes long: a truncated NetCDF file`);
  const version = bytes[3];
  if (version === 5) {
    fileError(name, 'this is a CDF-5 (64-bit data) NetCDF file; only the classic (CDF-1) and 64-bit-offset (CDF-2) formats are read');
  }
  if (version !== 1 && version !== 2) {
    fileError(name, `unknown NetCDF format version byte ${version} (only 1, classic, and 2, 64-bit offset, are read)`);
  }
}

/**
 * Runs netcdfjs's header parser on a copy of a growing prefix of the file,
 * so a corrupt element count cannot make it build arrays the size of the
 * whole file, and reports where the header ended.
 */
function parseHeader(src: NcBytes, name: string): { header: Header; end: number } {
  let size = Math.min(src.size, 1 << 16);
  for (;;) {
    // A copy: iobuffer reads byte arrays from the underlying ArrayBuffer,
    // past the end of a view (a pooled Buffer) when a count is too large.
    const prefix = src.read(0, size).slice();
    try {
      const reader = new NetCDFReader(prefix);
      if (reader.buffer.offset > size) throw new RangeError('Offset is outside the bounds of the DataView');
      return { header: reader.header, end: reader.buffer.offset };
    } catch (e) {
      const outOfBounds = e instanceof RangeError && /bounds|outside/i.test(e.message);
      if (outOfBounds && size < src.size) {
        if (size >= MAX_NETCDF_HEADER_BYTES) {
          fileError(name, `the NetCDF header is larger than this reader's limit of ${MAX_NETCDF_HEADER_BYTES} bytes (corrupt file?)`);
        }
        size = Math.min(src.size, MAX_NETCDF_HEADER_BYTES, size * 8);
        continue;
      }
      if (outOfBounds) fileError(name, 'the NetCDF header ends early: it describes more than the file holds (truncated or corrupt file)');
      const reason = (e instanceof Error ? e.message : String(e)).replace(/^Not a valid NetCDF v3\.x file: /, '').replace(/^non valid type (\d+)$/, 'unknown type code $1');
      fileError(name, `malformed NetCDF header: ${reason}`);
    }
  }
}

/** Undoes netcdfjs's one-character-per-signed-byte decoding and decodes UTF-8. */
function text(s: string): string {
  const raw = Uint8Array.from(s, (c) => c.charCodeAt(0) & 0xff);
  let end = raw.length;
  while (end > 0 && raw[end - 1] === 0) end--; // trailing NULs pad text in some writers
  return new TextDecoder('utf-8').decode(raw.subarray(0, end));
}

function isNcType(t: string): t is NcType {
  return t in NC_TYPE_SIZE;
}

/** Converts netcdfjs's attributes: signed bytes, scalars for one value, UTF-8 text. */
function convertAttrs(list: Attribute[], where: string, name: string): { attrs: NcAttrs; types: Record<string, NcType> } {
  const attrs: NcAttrs = {};
  const types: Record<string, NcType> = {};
  for (const a of list) {
    const key = text(a.name);
    if (!isNcType(a.type)) fileError(name, `malformed NetCDF header: attribute '${key}' of ${where} has an unknown type`);
    if (Object.prototype.hasOwnProperty.call(attrs, key)) fileError(name, `malformed NetCDF header: ${where} has two attributes named '${key}'`);
    let value: NcAttrValue;
    const v = a.value as unknown;
    if (a.type === 'char') value = text(String(v));
    else {
      let list2 = Array.isArray(v) ? (v as number[]) : [v as number];
      if (a.type === 'byte') list2 = list2.map((b) => (b << 24) >> 24); // NC_BYTE is signed
      value = list2.length === 1 ? list2[0] : list2;
    }
    setOwn(attrs, key, value);
    setOwn(types, key, a.type);
  }
  return { attrs, types };
}

/**
 * Parses the header of a NetCDF classic or 64-bit-offset file (no data).
 * Throws InputError (code File) naming `name` for bytes that are not such a
 * file: other formats, NetCDF-4/HDF5 and CDF-5 files (only classic and
 * 64-bit-offset are read), truncated or malformed headers, and files too
 * short for the data their header declares. Given an {@link NcBytes}, only
 * the header's bytes are read (a growing prefix, 64 KiB first).
 */
export function readNetcdfHeader(bytes: Uint8Array | NcBytes, name = 'input'): NcFile {
  const src = sourceOf(bytes);
  checkMagic(src, name);
  const { header, end } = parseHeader(src, name);
  const dimList = header.dimensions ?? [];
  const recordId = header.recordDimension.id;
  const dims: NcDimension[] = dimList.map((d, i) => ({ name: text(d.name), size: d.size, unlimited: i === recordId }));
  if (dimList.filter((d) => d.size === 0).length > 1) fileError(name, 'malformed NetCDF header: more than one unlimited dimension');
  const global = convertAttrs(header.globalAttributes ?? [], 'the file', name);

  const variables: NcVariable[] = [];
  const seen = new Set<string>();
  for (const v of header.variables ?? []) {
    const vname = text(v.name);
    if (seen.has(vname)) fileError(name, `malformed NetCDF header: two variables named '${vname}'`);
    seen.add(vname);
    if (!isNcType(v.type)) fileError(name, `malformed NetCDF header: variable '${vname}' has an unknown type`);
    for (const [k, id] of v.dimensions.entries()) {
      if (!Number.isInteger(id) || id < 0 || id >= dims.length) fileError(name, `malformed NetCDF header: variable '${vname}' refers to dimension ${id}, which does not exist`);
      if (k > 0 && dims[id].unlimited) fileError(name, `malformed NetCDF header: variable '${vname}' uses the unlimited dimension other than first`);
    }
    const { attrs, types } = convertAttrs(v.attributes as Attribute[], `variable '${vname}'`, name);
    variables.push({
      name: vname,
      dims: v.dimensions.map((id) => dims[id].name),
      shape: v.dimensions.map((id) => dims[id].size),
      type: v.type,
      attrs,
      attrTypes: types,
      isRecord: v.record,
      begin: v.offset,
    });
  }

  const file: NcFile = {
    format: header.version === 2 ? '64bit-offset' : 'classic',
    dims,
    globalAttrs: global.attrs,
    globalAttrTypes: global.types,
    variables,
    numRecords: 0,
    recordSize: 0,
  };
  layOut(file, header.recordDimension.length, src.size, end, name);
  return file;
}

/** Bytes of one record's slab (or of the whole variable, when not a record variable). */
function slabBytes(v: NcVariable): number {
  const dims = v.isRecord ? v.shape.slice(1) : v.shape;
  return dims.reduce((a, b) => a * b, 1) * NC_TYPE_SIZE[v.type];
}

/**
 * Works out the record size and count (counting records from the file
 * length when numrecs is STREAMING), puts the record count into the shapes,
 * and checks that every variable's data lies inside the file and after the
 * header.
 */
function layOut(file: NcFile, numrecs: number, length: number, headerEnd: number, name: string): void {
  const records = file.variables.filter((v) => v.isRecord);
  // The format spec (from memory): each record variable's slab is padded to
  // 4 bytes, except when there is exactly one record variable.
  file.recordSize = records.length === 1 ? slabBytes(records[0]) : records.reduce((s, v) => s + pad4(slabBytes(v)), 0);
  if (numrecs === NC_STREAMING) {
    const first = records.length ? Math.min(...records.map((v) => v.begin)) : length;
    numrecs = file.recordSize > 0 ? Math.max(0, Math.floor((length - first) / file.recordSize)) : 0;
  }
  file.numRecords = numrecs;
  const dim = file.dims.find((d) => d.unlimited);
  if (dim) dim.size = numrecs;
  for (const v of file.variables) {
    if (v.isRecord) v.shape[0] = numrecs;
    if (v.begin < headerEnd && slabBytes(v) > 0) {
      fileError(name, `malformed NetCDF header: the data of variable '${v.name}' would start at byte ${v.begin}, inside the header`);
    }
    const need = v.isRecord ? (numrecs === 0 ? 0 : v.begin + (numrecs - 1) * file.recordSize + slabBytes(v)) : v.begin + slabBytes(v);
    if (need > length) {
      fileError(name, `the file is ${length} bytes long but variable '${v.name}' needs bytes up to ${need}: a truncated NetCDF file`);
    }
  }
}

/** Reads `count` values of `type` big-endian from `view` at `off` into `out` from `at`. */
function decodeRun(view: DataView, off: number, count: number, type: NcType, unsigned: boolean, out: Float32Array | Float64Array, at: number): void {
  switch (type) {
    case 'byte':
      for (let i = 0; i < count; i++) out[at + i] = unsigned ? view.getUint8(off + i) : view.getInt8(off + i);
      break;
    case 'short':
      for (let i = 0; i < count; i++) out[at + i] = unsigned ? view.getUint16(off + 2 * i) : view.getInt16(off + 2 * i);
      break;
    case 'int':
      for (let i = 0; i < count; i++) out[at + i] = unsigned ? view.getUint32(off + 4 * i) : view.getInt32(off + 4 * i);
      break;
    case 'float':
      for (let i = 0; i < count; i++) out[at + i] = view.getFloat32(off + 4 * i);
      break;
    case 'double':
      for (let i = 0; i < count; i++) out[at + i] = view.getFloat64(off + 8 * i);
      break;
    case 'char':
      throw new Error('unreachable: char variables are refused before decoding');
  }
}

/** A hyperslab: `start` and `count` per dimension, as in the NetCDF API. */
export interface NcSelection {
  start?: number[];
  count?: number[];
}

function checkSelection(v: NcVariable, sel: NcSelection | undefined): { start: number[]; count: number[] } {
  const k = v.shape.length;
  const start = sel?.start ?? new Array<number>(k).fill(0);
  const count = sel?.count ?? v.shape.map((d, i) => d - start[i]);
  if (start.length !== k || count.length !== k) {
    throw new InputError(InputCode.Shape, `variable '${v.name}': start and count need ${k} entries, one per dimension (${v.dims.join(', ')})`);
  }
  for (let i = 0; i < k; i++) {
    const ok = Number.isInteger(start[i]) && Number.isInteger(count[i]) && start[i] >= 0 && count[i] >= 1 && start[i] + count[i] <= v.shape[i];
    if (!ok) {
      throw new InputError(
        InputCode.Shape,
        `variable '${v.name}': start ${start[i]} and count ${count[i]} do not select within dimension '${v.dims[i]}' of size ${v.shape[i]}`,
      );
    }
  }
  return { start, count };
}

/** Reads the stored values of a hyperslab of `v` into `out`, one run of the last dimension at a time. */
function readStored(src: NcBytes, file: NcFile, v: NcVariable, start: number[], count: number[], unsigned: boolean, out: Float32Array | Float64Array): void {
  const k = v.shape.length;
  const size = NC_TYPE_SIZE[v.type];
  // Strides in values of the (non-record part of the) variable.
  const stride = new Array<number>(k).fill(1);
  for (let i = k - 2; i >= 0; i--) stride[i] = stride[i + 1] * v.shape[i + 1];
  const runs = count.slice(0, k - 1).reduce((a, b) => a * b, 1);
  const run = count[k - 1];
  const index = new Array<number>(k - 1).fill(0); // odometer over the leading dimensions
  for (let r = 0; r < runs; r++) {
    let off = v.begin;
    for (let i = 0; i < k - 1; i++) {
      const at = start[i] + index[i];
      off += v.isRecord && i === 0 ? at * file.recordSize : at * stride[i] * size;
    }
    off += start[k - 1] * size;
    const bytes = src.read(off, run * size);
    decodeRun(new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength), 0, run, v.type, unsigned, out, r * run);
    for (let i = k - 2; i >= 0; i--) {
      if (++index[i] < count[i]) break;
      index[i] = 0;
    }
  }
}

/**
 * Reads the stored values of `v` at C-order positions [start, start +
 * count) into `out` from 0: runs that lie together in the file (a whole
 * fixed-size variable; one record's slab of a record variable) are read
 * together, at most {@link MAX_READ} bytes a read.
 */
function readStoredFlat(src: NcBytes, file: NcFile, v: NcVariable, start: number, count: number, unsigned: boolean, out: Float32Array | Float64Array): void {
  const size = NC_TYPE_SIZE[v.type];
  // Values of one record's slab (records are the only breaks in a variable's bytes).
  const slab = v.isRecord ? v.shape.slice(1).reduce((a, b) => a * b, 1) : Infinity;
  const most = Math.max(1, Math.floor(MAX_READ / size));
  for (let done = 0; done < count; ) {
    const at = start + done;
    const record = v.isRecord ? Math.floor(at / slab) : 0;
    const within = v.isRecord ? at - record * slab : at;
    const n = Math.min(count - done, most, v.isRecord ? slab - within : Infinity);
    const bytes = src.read(v.begin + record * file.recordSize + within * size, n * size);
    decodeRun(new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength), 0, n, v.type, unsigned, out, done);
    done += n;
  }
}

/**
 * Reads the stored values of `v` at C-order positions [start, start +
 * count) into `out` from 0, as numbers (integers read unsigned when
 * `unsigned`). The classic reader decodes them from the file's bytes; the
 * NetCDF-4 reader (src/io/hdf5-read.ts) reads them through HDF5.
 */
export type StoredReader = (v: NcVariable, start: number, count: number, unsigned: boolean, out: Float32Array | Float64Array) => void;

/** One number from a numeric attribute, or undefined when absent. */
function scalarAttr(v: NcVariable, key: string): number | undefined {
  const a = v.attrs[key];
  if (a === undefined) return undefined;
  const n = Array.isArray(a) && a.length === 1 ? a[0] : a;
  if (typeof n !== 'number' || !Number.isFinite(n)) {
    throw new InputError(InputCode.File, `variable '${v.name}': attribute ${key} must be one finite number, got ${JSON.stringify(a)}`);
  }
  return n;
}

/** `x` converted to the stored type, or null when no stored value can equal it. */
function toStored(x: number, type: NcType, unsigned: boolean): number | null {
  if (type === 'float') return Math.fround(x);
  if (type === 'double') return x;
  if (type === 'char') return null;
  const [lo, hi] = unsigned ? [0, NC_INT_RANGE[type][1] * 2 + 1] : NC_INT_RANGE[type];
  return Number.isInteger(x) && x >= lo && x <= hi ? x : null;
}

/** The stored value next to `p` towards +inf (dir 1) or -inf (-1), or null past the type's range. */
function neighbour(p: number, type: NcType, unsigned: boolean, dir: 1 | -1): number | null {
  if (type === 'float' || type === 'double') {
    const f = type === 'float' ? new Float32Array(1) : new Float64Array(1);
    f[0] = p;
    if (!Number.isFinite(p)) return null;
    if (p === 0) return dir * (type === 'float' ? 1.401298464324817e-45 : 5e-324);
    const bits = type === 'float' ? new Int32Array(f.buffer) : new BigInt64Array(f.buffer);
    const up = (p > 0) === (dir > 0);
    if (bits instanceof Int32Array) bits[0] += up ? 1 : -1;
    else bits[0] += up ? 1n : -1n;
    return f[0];
  }
  return toStored(p + dir, type, unsigned);
}

/**
 * The missing values of `v` in its stored type (CF 2.5.1: _FillValue, then
 * every missing_value; NaN entries dropped, since NaN cells are missing by
 * nature), and where the first came from. Without either attribute, the
 * netCDF default fill of the type (not for byte, whose whole range is
 * commonly valid: from memory of the NetCDF User's Guide).
 */
function missingValues(v: NcVariable, unsigned: boolean): { list: number[]; source: NcValues['fillSource'] } {
  const list: number[] = [];
  let source: NcValues['fillSource'] = null;
  const add = (x: unknown, from: NcValues['fillSource']): void => {
    if (typeof x !== 'number' || Number.isNaN(x)) return;
    const s = toStored(x, v.type, unsigned);
    if (s === null || list.includes(s)) return;
    if (list.length === 0) source = from;
    list.push(s);
  };
  const fv = v.attrs._FillValue;
  const mv = v.attrs.missing_value;
  for (const x of Array.isArray(fv) ? fv.slice(0, 1) : [fv]) add(x, '_FillValue'); // _FillValue is one value
  for (const x of Array.isArray(mv) ? mv : [mv]) add(x, 'missing_value');
  if (fv === undefined && mv === undefined && v.type !== 'byte' && !unsigned) add(NC_DEFAULT_FILL[v.type], 'default');
  return { list, source };
}

/**
 * The fill for a packed variable: the unpacked first missing value, unless
 * a neighbouring stored value unpacks to the same number (possible when
 * add_offset dwarfs scale_factor), in which case {@link PACKED_FALLBACK_FILL}.
 * Unpacking is monotone in the stored value (each rounding step is), so
 * checking the two neighbours is enough. Independent of the data, so every
 * hyperslab of a variable gets the same fill.
 */
function packedFill(first: number, v: NcVariable, unsigned: boolean, scale: number, offset: number): number {
  const unpack = (p: number): number => p * scale + offset;
  const f = unpack(first);
  const clash = ([1, -1] as const).some((d) => {
    const n = neighbour(first, v.type, unsigned, d);
    return n !== null && unpack(n) === f;
  });
  if (Number.isFinite(f) && !clash) return f;
  if (v.type !== 'float' && v.type !== 'double' && v.type !== 'char') {
    const [lo, hi] = unsigned ? [0, NC_INT_RANGE[v.type][1] * 2 + 1] : NC_INT_RANGE[v.type];
    const [a, b] = [unpack(lo), unpack(hi)].sort((x, y) => x - y);
    if (PACKED_FALLBACK_FILL >= a && PACKED_FALLBACK_FILL <= b) {
      throw new InputError(InputCode.File, `variable '${v.name}': no fill value can be told apart from its unpacked values`);
    }
  }
  return PACKED_FALLBACK_FILL;
}

/**
 * Reads one variable (or a hyperslab of it: `start` and `count` per
 * dimension) as physical values, following the CF conventions (from memory,
 * CF 1.8):
 *  - Section 8.1 "Packed Data": when scale_factor or add_offset is present,
 *    unpacked = packed * scale_factor + add_offset (missing ones default to
 *    1 and 0). The result is float64 here, whatever the type of the two
 *    attributes, so no second rounding is added. `_Unsigned = "true"` (a
 *    NetCDF User's Guide convention) reads integer types as unsigned.
 *  - Section 2.5.1 "Missing data": a cell equal to _FillValue or to any
 *    missing_value, compared in the stored type before unpacking, is
 *    missing. Without either attribute, the netCDF default fill of the type
 *    marks missing cells (cells never written), except for byte.
 *    valid_min, valid_max and valid_range are NOT applied: applying them
 *    would overwrite stored values, so a round trip would no longer give
 *    them back; they are carried in `attrs`.
 * Missing cells hold `fill` in `values`:
 *  - unpacked float/double: the stored _FillValue itself, bit for bit (a
 *    second, different missing value is rewritten to it; see `remapped`).
 *    A NaN _FillValue gives fill null: NaN cells stay NaN.
 *  - unpacked integers: the stored missing value, exactly.
 *  - packed: the unpacked _FillValue when finite and distinct from every
 *    unpacked valid value, else {@link PACKED_FALLBACK_FILL} (-9.99e33).
 * Refuses (InputError naming the variable) unknown names (Missing), char
 * variables (Dtype), variables of fewer than 2 dimensions and empty ones
 * (Shape).
 */
export function readNetcdfVariable(bytes: Uint8Array | NcBytes, file: NcFile, name: string, selection?: NcSelection, options: { mark?: boolean } = {}): NcValues {
  const p = prepare(file, name, options);
  const { start, count } = checkSelection(p.v, selection);
  const n = count.reduce((a, b) => a * b, 1);
  const values = p.f32 ? new Float32Array(n) : new Float64Array(n);
  readStored(sourceOf(bytes), file, p.v, start, count, p.unsigned, values);
  const { fillCount, remapped } = convert(p, values);
  return { ...p.info, values, shape: count.slice(), fillCount, remapped };
}

/** A variable's reading, worked out from its header before any value is read. */
interface Prepared {
  v: NcVariable;
  unsigned: boolean;
  f32: boolean;
  packed: boolean;
  scale: number;
  offset: number;
  /** Missing values in the stored type: the fill's first. */
  list: number[];
  mark: boolean;
  info: Omit<NcValues, 'values' | 'fillCount' | 'remapped'>;
}

/** The refusals and choices of {@link readNetcdfVariable} that depend on the header alone. */
function prepare(file: NcFile, name: string, options: { mark?: boolean }): Prepared {
  const v = file.variables.find((x) => x.name === name);
  if (!v) {
    const known = file.variables.map((x) => x.name).join(', ');
    throw new InputError(InputCode.Missing, `no variable named '${name}' in the NetCDF file (it has: ${known || 'no variables'})`);
  }
  if (v.type === 'char') throw new InputError(InputCode.Dtype, `variable '${name}' holds text (char), not numbers; only numeric variables can be read`);
  if (v.shape.length < 2) {
    throw new InputError(InputCode.Shape, `variable '${name}' has ${v.shape.length} dimension${v.shape.length === 1 ? '' : 's'} (${v.dims.join(', ') || 'a scalar'}); only variables of 2 or more dimensions are fields`);
  }
  const empty = v.shape.findIndex((d) => d === 0);
  if (empty >= 0) throw new InputError(InputCode.Shape, `variable '${name}' holds no values: dimension '${v.dims[empty]}' has size 0`);
  const unsigned = v.type !== 'float' && v.type !== 'double' && String(v.attrs._Unsigned ?? '').toLowerCase() === 'true';
  const scale = scalarAttr(v, 'scale_factor');
  const offset = scalarAttr(v, 'add_offset');
  const packed = scale !== undefined || offset !== undefined;
  // Float32Array holds every byte and short (signed or not) exactly.
  const f32 = !packed && (v.type === 'float' || v.type === 'byte' || v.type === 'short');
  const { list, source } = missingValues(v, unsigned);
  let fill: number | null = list.length ? list[0] : null;
  if (packed && fill !== null) fill = packedFill(fill, v, unsigned, scale ?? 1, offset ?? 0);
  const s = scale ?? 1;
  const o = offset ?? 0;
  const mark = options.mark === true && list.length > 1;
  if (mark && list.length - 1 > MAX_MARKS) throw new InputError(InputCode.File, `variable '${name}' declares ${list.length} missing values; at most ${MAX_MARKS + 1} can be kept apart`);
  const marks = mark ? list.slice(1).map((x) => (packed ? x * s + o : x)) : [];
  const info: Prepared['info'] = {
    dtype: f32 ? 'f32' : 'f64',
    shape: v.shape.slice(),
    dims: v.dims.slice(),
    fill,
    fillSource: fill === null ? null : source,
    attrs: { ...v.attrs },
    unpacked: packed,
    storedType: v.type,
    packing: packed ? { scale: s, offset: o } : null,
    marks,
  };
  return { v, unsigned, f32, packed, scale: s, offset: o, list, mark, info };
}

/** Stored values (read into `values`) to physical ones, in place: missing values to the fill (or their marks), packed values unpacked. */
function convert(p: Prepared, values: Float32Array | Float64Array): { fillCount: number; remapped: number } {
  const { list, mark, packed, scale: s, offset: o } = p;
  const fill = p.info.fill;
  if (mark && holdsMark(values, list.length - 1)) throw new InputError(InputCode.File, `variable '${p.v.name}' holds NaN values with the bit patterns rankfield uses to keep its missing values apart; it cannot be packed with them`);
  let fillCount = 0;
  let remapped = 0;
  const n = values.length;
  for (let i = 0; i < n; i++) {
    const x = values[i];
    const at = list.length === 0 ? -1 : x === list[0] ? 0 : list.length > 1 ? list.indexOf(x) : -1;
    if (at > 0 && mark) setMark(values, i, at);
    else if (at >= 0) {
      values[i] = fill as number;
      fillCount++;
      if (at > 0) remapped++;
    } else if (packed) values[i] = x * s + o;
  }
  return { fillCount, remapped };
}

/**
 * One variable read a band at a time, as {@link readNetcdfVariable} reads it
 * whole: {@link NcVariableReader.rows} gives rows of the C-order matrix of
 * its values (all dimensions but the last as rows) as physical values, and
 * reads only the bytes of those rows.
 */
export class NcVariableReader {
  /** What {@link readNetcdfVariable} tells besides the values (shape: the variable's). */
  readonly info: Omit<NcValues, 'values' | 'fillCount' | 'remapped'>;
  /** [rows, cols] of the matrix read: the product of all dimensions but the last, and the last. */
  readonly shape: [number, number];
  /** Cells read so far that held a missing value (see {@link NcValues}). */
  fillCount = 0;
  remapped = 0;
  private readonly p: Prepared;

  constructor(
    private readonly stored: StoredReader,
    file: NcFile,
    name: string,
    options: { mark?: boolean } = {},
  ) {
    this.p = prepare(file, name, options);
    this.info = this.p.info;
    const shape = this.p.v.shape;
    this.shape = [shape.slice(0, -1).reduce((a, b) => a * b, 1), shape[shape.length - 1]];
  }

  get dtype(): 'f32' | 'f64' {
    return this.info.dtype;
  }

  /** Values at C-order positions [start, start + count). */
  values(start: number, count: number): Float32Array | Float64Array {
    const total = this.shape[0] * this.shape[1];
    if (!Number.isSafeInteger(start) || !Number.isSafeInteger(count) || start < 0 || count < 0 || start + count > total) {
      throw new InputError(InputCode.Option, `variable '${this.p.v.name}': values ${start}..${start + count} lie outside 0..${total}`);
    }
    const out = this.p.f32 ? new Float32Array(count) : new Float64Array(count);
    this.stored(this.p.v, start, count, this.p.unsigned, out);
    const c = convert(this.p, out);
    this.fillCount += c.fillCount;
    this.remapped += c.remapped;
    return out;
  }

  /** Rows [r0, r0 + count) of the matrix. */
  rows(r0: number, count: number): Float32Array | Float64Array {
    return this.values(r0 * this.shape[1], count * this.shape[1]);
  }
}

/** The stored-value reader of a classic file's bytes. */
export function classicStored(bytes: Uint8Array | NcBytes, file: NcFile): StoredReader {
  const src = sourceOf(bytes);
  return (v, start, count, unsigned, out) => readStoredFlat(src, file, v, start, count, unsigned, out);
}

/**
 * The attributes that describe values returned by
 * {@link readNetcdfVariable}, for writing them back as a float or double
 * variable: scale_factor, add_offset and _Unsigned dropped; _FillValue set
 * to `fill` (and missing_value dropped, since its cells now hold `fill`);
 * for packed variables, valid_min/valid_max/valid_range stored in the
 * packed type are unpacked. Types: the new _FillValue and unpacked ranges
 * take the values' type; the rest keep theirs.
 */
export function physicalAttributes(v: NcVariable, read: Omit<NcValues, 'values'>): { attrs: NcAttrs; attrTypes: Record<string, NcType> } {
  const attrs: NcAttrs = {};
  const attrTypes: Record<string, NcType> = {};
  const outType: NcType = read.dtype === 'f32' ? 'float' : 'double';
  const unpack = (x: number): number => (read.packing ? x * read.packing.scale + read.packing.offset : x);
  const drop = new Set(['scale_factor', 'add_offset', '_Unsigned', 'missing_value', '_FillValue']);
  for (const [key, value] of Object.entries(v.attrs)) {
    if (drop.has(key)) continue;
    // valid_* in the stored type are in stored (packed) units, per CF 8.1 (from memory).
    if (/^valid_(min|max|range)$/.test(key) && v.attrTypes[key] === v.type && typeof value !== 'string') {
      setOwn<NcAttrValue>(attrs, key, Array.isArray(value) ? value.map(unpack) : unpack(value));
      setOwn(attrTypes, key, outType);
    } else {
      setOwn(attrs, key, value);
      setOwn(attrTypes, key, v.attrTypes[key]);
    }
  }
  if (read.fill !== null) {
    attrs._FillValue = read.fill;
    attrTypes._FillValue = outType;
  }
  return { attrs, attrTypes };
}
