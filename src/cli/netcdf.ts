/**
 * The command line's NetCDF side: choosing the variables of a NetCDF
 * classic or 64-bit-offset file and their layouts for `pack`, and building
 * a NetCDF classic file from an archive's fields for `unpack -o OUT.nc`.
 */
import { FormatCode, FormatError, InputCode, InputError, type Attrs, type Bound, type FieldHeader } from '../index.js';
import { physicalAttributes, type NcVariableReader, type NcAttrs, type NcAttrValue, type NcFile, type NcType, type NcValues, type NcVariable } from '../io/netcdf-read.js';
import { NC_TYPE_SIZE, setOwn } from '../io/netcdf-types.js';
import type { NetcdfInput, StoredBits } from '../io/netcdf-input.js';
import { chooseLayoutFrom, validRange } from '../layout.js';
import type { FloatArray } from '../types.js';
import { MISSING_VALUES_KEY } from '../missing.js';
import { formatBound } from '../codec/bound.js';
import { VERSION_STRING } from '../version.js';
import { toStoredType } from './netcdf-stored.js';
import type { NcWriteFile, NcWriteValues, NcWriteVariable } from '../io/netcdf-write.js';
import { layoutGrid, MAX_ATTR_STRING, printable } from '../format/schema.js';
import { UsageError } from './errors.js';
import { byPath } from './names.js';

export { byPath, isNetcdfPath } from './names.js';
import { RangeWatch, suspectMessage } from './fill-guard.js';

/** Attribute keys of the archive's own, beside the variable's attributes (prefix "rankfield:"). */
export const KEY = {
  /** Field attr: the values are CF-unpacked physical values (scale_factor/add_offset applied). */
  unpacked: 'rankfield:unpacked',
  /** Field attr: [scale_factor, add_offset] that were applied. */
  packing: 'rankfield:packing',
  /** Field attr: the NetCDF type the variable was stored in. */
  storedType: 'rankfield:nc_type',
  /** Field or archive attr: "name=type" per NetCDF attribute, so .nc output gives each attribute its type back. */
  attrTypes: 'rankfield:attr_types',
  /** Archive attr: name of the unlimited (record) dimension of the source file. */
  unlimited: 'rankfield:unlimited',
  /** Archive attr: the source's NetCDF format. */
  format: 'rankfield:nc_format',
  /** Archive attr: JSON of the source's dimensions in file order, [{ name, size, unlimited }]. */
  dims: 'rankfield:nc_dims',
  /** Archive attr: every variable name of the source, in file order (fields and carried ones). */
  order: 'rankfield:nc_order',
  /** Field attr: JSON of the variable's own attributes, [[name, type, value], ...] in file order, to write it back as stored (see netcdf-stored.ts). */
  storedAttrs: 'rankfield:nc_attrs',
  /**
   * Field attr: the physical value of each missing value declared beside the
   * fill (a missing_value other than _FillValue), in order; its cells hold the
   * k-th missing-value mark (a quiet NaN, see src/io/netcdf-types.ts) in the archive.
   */
  marks: MISSING_VALUES_KEY,
  /** Archive attr: one JSON string per variable carried losslessly (not packed as a field); see {@link carriedJson}. */
  carried: 'rankfield:nc_carried',
} as const;

/** Largest total of the carried variables' JSON in one archive: half the readers' default header limit of 16 MiB. */
export const MAX_CARRIED_BYTES = 8 << 20;

/** The last part of a group path ('ocean/depth' -> 'depth'). */
export function baseName(name: string): string {
  return name.slice(name.lastIndexOf('/') + 1);
}


/** `--matrix A,B:NAME`: the names of the leading axes that form the rows. */
export function parseMatrix(text: string): string[] {
  const m = /^([^:]+):([^:]+)$/.exec(text);
  const lead = m ? m[1].split(',').map((s) => s.trim()) : [];
  if (!m || lead.some((s) => s.length === 0) || m[2].trim().length === 0) {
    throw new UsageError(`--matrix must be AXES:NAME, the leading axes that form the rows (comma-separated) and a name for the rest (e.g. time:space), got '${printable(text)}'`);
  }
  return lead;
}

/** What is known of a variable's values once read through (all of {@link NcValues} but the values). */
export type NcInfo = Omit<NcValues, 'values'>;

/** One variable, read through once and laid out for packing. */
export interface NcField {
  name: string;
  read: NcInfo;
  /** Its values, a band at a time ({@link fieldBands}). */
  reader: NcVariableReader;
  rows: number;
  cols: number;
  slices: number;
  layout: string | undefined;
  attrs: Attrs;
}

function typesText(types: Record<string, NcType>): string[] {
  return Object.entries(types).map(([k, t]) => `${k}=${t}`);
}

const CANONICAL_NAN_F32 = 0x7fc00000;
const CANONICAL_NAN_F64 = 0x7ff8000000000000n;

/**
 * A number for JSON, losslessly: finite numbers as JSON numbers (the
 * shortest round-trip form of ECMAScript's Number::toString, exact for
 * float64, and for float32 values widened to float64), except -0 as "-0";
 * "Infinity", "-Infinity"; "NaN" for the canonical quiet NaN of the type,
 * "NaN:0x..." (the bit pattern in hex) for any other.
 */
function jsonNumber(x: number, bits?: () => bigint, canonical?: bigint): number | string {
  if (Number.isNaN(x)) {
    const b = bits?.();
    return b === undefined || b === canonical ? 'NaN' : `NaN:0x${b.toString(16)}`;
  }
  if (x === Infinity) return 'Infinity';
  if (x === -Infinity) return '-Infinity';
  if (Object.is(x, -0)) return '-0';
  return x;
}

function jsonValues(values: StoredBits): (number | string)[] | string {
  if (values instanceof Uint8Array) {
    let s = '';
    for (let i = 0; i < values.length; i += 8192) s += String.fromCharCode(...values.subarray(i, i + 8192));
    return s; // one character per byte (code 0..255), so every byte comes back
  }
  const out: (number | string)[] = new Array<number | string>(values.length);
  if (values instanceof Float32Array) {
    const u = new Uint32Array(values.buffer, values.byteOffset, values.length);
    for (let i = 0; i < values.length; i++) out[i] = jsonNumber(values[i], () => BigInt(u[i]), BigInt(CANONICAL_NAN_F32));
  } else if (values instanceof Float64Array) {
    const u = new BigUint64Array(values.buffer, values.byteOffset, values.length);
    for (let i = 0; i < values.length; i++) out[i] = jsonNumber(values[i], () => u[i], CANONICAL_NAN_F64);
  } else for (let i = 0; i < values.length; i++) out[i] = values[i];
  return out;
}

/**
 * One variable not packed as a field, as JSON: { name, dims, type, attrs:
 * [[name, type, value], ...] in file order, values }, values row-major as
 * numbers (see {@link jsonNumber}) or, for char, one string of one
 * character per byte.
 */
function carriedJson(input: NetcdfInput, v: NcVariable): string {
  return JSON.stringify({ name: v.name, dims: v.dims, type: v.type, attrs: attrsJson(v), values: jsonValues(input.storedBits(v)) });
}

/** A JSON number back (see {@link jsonNumber}); `bad` is called for anything else. */
function numberFromJson(x: unknown, bad: (why: string) => never): number {
  if (typeof x === 'number') return x;
  if (x === '-0') return -0;
  if (x === 'Infinity') return Infinity;
  if (x === '-Infinity') return -Infinity;
  if (x === 'NaN' || (typeof x === 'string' && /^NaN:0x[0-9a-f]{1,16}$/.test(x))) return NaN;
  return bad(`${JSON.stringify(x)} is not a number`);
}

/** A variable's attributes as JSON: [[name, type, value], ...] in file order. */
export function attrsJson(v: NcVariable): (string | number | (string | number)[])[][] {
  return Object.entries(v.attrs).map(([k, a]) => [k, v.attrTypes[k], typeof a === 'string' ? a : Array.isArray(a) ? a.map((x) => jsonNumber(x)) : jsonNumber(a)]);
}

/** Attributes back from {@link attrsJson} (checked, since archives come from anywhere). */
export function attrsFromJson(list: unknown, bad: (why: string) => never): { attrs: NcAttrs; attrTypes: Record<string, NcType> } {
  const attrs: NcAttrs = {};
  const attrTypes: Record<string, NcType> = {};
  if (!Array.isArray(list)) return bad('attrs must be a list');
  for (const a of list as unknown[]) {
    if (!Array.isArray(a) || a.length !== 3 || typeof a[0] !== 'string' || typeof a[1] !== 'string' || !(a[1] in NC_TYPE_SIZE)) return bad('an attribute is not [name, type, value]');
    const num = (x: unknown) => numberFromJson(x, bad);
    const value: NcAttrValue = typeof a[2] === 'string' && a[1] === 'char' ? a[2] : Array.isArray(a[2]) ? a[2].map(num) : num(a[2]);
    setOwn(attrs, a[0], value);
    setOwn(attrTypes, a[0], a[1] as NcType);
  }
  return { attrs, attrTypes };
}

/** A carried variable back from its JSON (archive attributes: checked, since archives come from anywhere). */
function fromCarried(text: unknown, i: number): NcWriteVariable {
  const bad = (why: string): never => {
    throw new FormatError(FormatCode.Malformed, `archive attribute ${KEY.carried} entry ${i}: ${why}`);
  };
  if (typeof text !== 'string') return bad('not a string');
  let o: unknown;
  try {
    o = JSON.parse(text);
  } catch {
    return bad('not valid JSON');
  }
  const r = o as { name?: unknown; dims?: unknown; type?: unknown; attrs?: unknown; values?: unknown };
  if (o === null || typeof o !== 'object' || typeof r.name !== 'string') return bad('no variable name');
  const where = `variable '${printable(r.name)}'`;
  if (!Array.isArray(r.dims) || !r.dims.every((d) => typeof d === 'string')) return bad(`${where}: dims must be a list of names`);
  if (typeof r.type !== 'string' || !(r.type in NC_TYPE_SIZE)) return bad(`${where}: unknown type`);
  const type = r.type as NcType;
  const num = (x: unknown): number => numberFromJson(x, (why) => bad(`${where}: ${why}`));
  const { attrs, attrTypes } = attrsFromJson(r.attrs, (why) => bad(`${where}: ${why}`));
  let values: NcWriteValues;
  if (type === 'char') {
    if (typeof r.values !== 'string') return bad(`${where}: char values must be a string`);
    const s = r.values;
    values = new Uint8Array(s.length);
    for (let k = 0; k < s.length; k++) {
      const c = s.charCodeAt(k);
      if (c > 255) return bad(`${where}: char values hold a character beyond one byte`);
      values[k] = c;
    }
  } else {
    if (!Array.isArray(r.values)) return bad(`${where}: values must be a list`);
    const list = r.values as unknown[];
    if (type === 'float' || type === 'double') {
      const f = type === 'float' ? new Float32Array(list.length) : new Float64Array(list.length);
      const u = type === 'float' ? new Uint32Array(f.buffer) : new BigUint64Array(f.buffer);
      list.forEach((x, k) => {
        if (typeof x === 'string' && x.startsWith('NaN:')) {
          const b = BigInt(x.slice(4));
          if (u instanceof Uint32Array) u[k] = Number(b & 0xffffffffn);
          else u[k] = b;
        } else f[k] = num(x);
      });
      values = f;
    } else values = list.map(num); // the writer checks the range of each integer
  }
  return { name: r.name, dims: r.dims as string[], type, attrs, attrTypes, values };
}

/** Values read at a time in the passes over a variable (16 or 32 MiB). */
export const BAND_VALUES = 1 << 22;

/**
 * The variables to pack: those named by `--var` (in the order given), else
 * every numeric variable of two or more non-empty dimensions. `matrix`
 * (from --matrix) lays out every variable whose leading dimensions are
 * those names as 'matrix:A'; the others get the default layout.
 *
 * Each variable is read a band of rows at a time (never whole): once here,
 * for its missing cells, its value range and the fill-value guard, then by
 * the layout trial's samples, and again by the encoder through
 * {@link fieldBands}; `bandValues` values at most a read in the first pass.
 */
export function netcdfFields(
  input: NetcdfInput,
  vars: string[] | undefined,
  matrix: string[] | undefined,
  bound: Bound,
  choose: 'auto' | 'slices' = 'auto',
  fill?: number | false,
  bandValues: number = BAND_VALUES,
): { file: NcFile; fields: NcField[]; archiveAttrs: Attrs; carried: string[] } {
  const { file, path } = input;
  let names: string[];
  if (vars && vars.length > 0) {
    const seen = new Set<string>();
    names = vars.map((v) => byPath(file.variables.map((x) => x.name), v));
    for (const v of names) {
      if (seen.has(v)) throw new UsageError(`--var '${printable(v)}' is given twice`);
      seen.add(v);
    }
  } else {
    names = file.variables.filter((v) => v.type !== 'char' && v.shape.length >= 2 && v.shape.every((d) => d > 0)).map((v) => v.name);
    if (names.length === 0) throw new InputError(InputCode.Shape, `${path}: no numeric variable of 2 or more dimensions to pack (variables: ${file.variables.map((v) => `${v.name}(${v.dims.join(', ')})`).join(', ') || 'none'})`);
  }
  const named = (e: unknown): unknown => {
    if (e instanceof InputError) {
      const hint = e.code === InputCode.Missing ? '' : ' (variables that are not fields are carried losslessly with the fields packed: leave them out of --var)';
      return new InputError(e.code, `${path}: ${e.message}${hint}`);
    }
    return e;
  };
  const fields = names.map((name): NcField => {
    let reader: NcVariableReader;
    try {
      reader = input.variable(name, { mark: true });
    } catch (e) {
      throw named(e);
    }
    const info = reader.info;
    const v = file.variables.find((x) => x.name === name)!;
    const f32 = info.dtype === 'f32';
    // --fill declares the fill of a variable without _FillValue / missing_value (one with netCDF's default fill only).
    const declare = typeof fill === 'number' && (info.fill === null || info.fillSource === 'default');
    const finalFill = declare ? (f32 ? Math.fround(fill as number) : (fill as number)) : info.fill;
    // One pass over the variable: its missing cells, the cells holding --fill, the value range, the fill-value guard.
    const watch = fill !== false ? new RangeWatch(finalFill) : null;
    const range: [number, number] = [Infinity, -Infinity];
    let given = 0;
    const [rows, cols] = reader.shape;
    const step = Math.max(1, Math.floor(bandValues / cols));
    for (let r0 = 0; r0 < rows; r0 += step) {
      let values: FloatArray;
      try {
        values = reader.rows(r0, Math.min(step, rows - r0));
      } catch (e) {
        throw named(e);
      }
      if (declare) for (let i = 0; i < values.length; i++) if (values[i] === finalFill) given++;
      watch?.add(values);
      validRange(values, finalFill, range);
    }
    const read: NcInfo = { ...info, fillCount: reader.fillCount, remapped: reader.remapped };
    if (declare) {
      if (read.fillCount > 0) throw new UsageError(`${path}: variable '${printable(name)}' has ${read.fillCount} cells of netCDF's default fill value ${read.fill}, which mark missing cells already; --fill cannot add a second`);
      read.fill = finalFill;
      read.fillSource = '_FillValue';
      read.fillCount = given;
    }
    const s = watch?.suspect();
    if (s) throw new UsageError(suspectMessage(s, `variable '${printable(name)}' of '${path}'`, f32));
    const k = read.shape.length;
    // Dimension names match without regard to case (TIME, Time and time alike).
    // A dimension of a group ('ocean/time') also answers to its own name ('time').
    const same = (dim: string, d: string) => dim.toLowerCase() === d.toLowerCase() || baseName(dim).toLowerCase() === d.toLowerCase();
    const lead = matrix && matrix.length < k && matrix.every((d, i) => same(read.dims[i], d)) ? matrix.length : 0;
    // --matrix overrides; without it (and without --layout slices) a variable of 3+ axes takes the layout whose sample packs smallest.
    const flat = (start: number, count: number): FloatArray => {
      try {
        return reader.values(start, count);
      } catch (e) {
        throw named(e);
      }
    };
    const layout = lead > 0 ? `matrix:${lead}` : k > 2 ? (matrix || choose === 'slices' ? 'slices' : chooseLayoutFrom(flat, read.dtype, read.shape, bound, read.fill, range)) : undefined;
    const g = layout ? (layoutGrid(read.shape, layout) as { slices: number; rows: number; cols: number }) : { slices: 1, rows: read.shape[0], cols: read.shape[1] };
    const phys = physicalAttributes(v, read);
    const attrs: Attrs = { ...(phys.attrs as Attrs) };
    attrs[KEY.attrTypes] = typesText(phys.attrTypes);
    attrs[KEY.storedType] = read.storedType;
    const own = attrsJson(v);
    // --fill declares the variable's _FillValue, in its stored type (packed: the stored value the fill unpacks from).
    if (declare && read.fill !== null) {
      const sv = read.packing ? (read.fill - read.packing.offset) / read.packing.scale : read.fill;
      own.push(['_FillValue', v.type, v.type === 'float' || v.type === 'double' ? sv : Math.round(sv)]);
    }
    attrs[KEY.storedAttrs] = JSON.stringify(own);
    if (read.marks.length > 0) attrs[KEY.marks] = read.marks;
    if (read.unpacked && read.packing) {
      attrs[KEY.unpacked] = true;
      attrs[KEY.packing] = [read.packing.scale, read.packing.offset];
    }
    return { name, read, reader, rows: g.rows, cols: g.cols, slices: g.slices, layout, attrs };
  });
  if (matrix && !fields.some((f) => f.layout?.startsWith('matrix:'))) {
    const have = fields.map((f) => `${printable(f.name)}(${f.read.dims.map(printable).join(', ')})`).join(', ');
    throw new UsageError(`--matrix ${matrix.join(',')}:...: no variable packed has leading dimensions (${matrix.join(', ')}) followed by more; the variables are ${have}`);
  }
  const archiveAttrs: Attrs = { ...(file.globalAttrs as Attrs) };
  archiveAttrs[KEY.attrTypes] = typesText(file.globalAttrTypes);
  archiveAttrs[KEY.format] = file.format;
  const unlimited = file.dims.find((d) => d.unlimited);
  if (unlimited) archiveAttrs[KEY.unlimited] = unlimited.name;
  // Every variable that cannot be a field (char, fewer than 2 dimensions, a dimension of size 0) is carried
  // losslessly in the archive's attributes, as are, without --var, any others not packed; with --var, the
  // numeric variables of 2+ dimensions left out stay out (that is what --var chooses).
  const packed = new Set(names);
  const carried = file.variables.filter((v) => !packed.has(v.name) && (!(vars && vars.length > 0) || v.type === 'char' || v.shape.length < 2 || v.shape.some((d) => d === 0)));
  const texts: string[] = [];
  let total = 0;
  for (const v of carried) {
    const what = `${path}: variable '${printable(v.name)}' (${v.type}, ${v.shape.join('x') || 'scalar'}) is not packed as a field and would be carried losslessly in the archive's attributes`;
    // Each value takes at least one character and a comma: a variable beyond the limit is refused before it is read.
    const least = v.type === 'char' ? v.shape.reduce((a, b) => a * b, 1) : 2 * v.shape.reduce((a, b) => a * b, 1);
    if (least > MAX_ATTR_STRING) {
      throw new InputError(InputCode.Shape, `${what}, but takes at least ${least} bytes there, more than the ${MAX_ATTR_STRING} readers accept; leave it out by naming the variables to pack with --var`);
    }
    const t = carriedJson(input, v);
    const n = Buffer.byteLength(t, 'utf8');
    total += n;
    if (n > MAX_ATTR_STRING) {
      throw new InputError(InputCode.Shape, `${what}, but takes ${n} bytes there, more than the ${MAX_ATTR_STRING} readers accept; leave it out by naming the variables to pack with --var`);
    }
    if (total > MAX_CARRIED_BYTES) {
      throw new InputError(InputCode.Shape, `${what}, but the carried variables up to it take ${total} bytes, more than the ${MAX_CARRIED_BYTES} an archive header may spend on them; name the variables to pack with --var`);
    }
    texts.push(t);
  }
  archiveAttrs[KEY.dims] = JSON.stringify(file.dims.map((d) => ({ name: d.name, size: d.size, unlimited: d.unlimited })));
  archiveAttrs[KEY.order] = file.variables.filter((v) => packed.has(v.name) || carried.includes(v)).map((v) => v.name);
  if (texts.length > 0) archiveAttrs[KEY.carried] = texts;
  return { file, fields, archiveAttrs, carried: carried.map((v) => v.name) };
}

/**
 * The band reader the encoder packs a field from: rows of its stacked
 * matrix (slices x rows, each of `cols` values), read from the variable's
 * C-order values.
 */
export function fieldBands(f: NcField): (r0: number, count: number) => FloatArray {
  return (r0, count) => f.reader.values(r0 * f.cols, count * f.cols);
}

/** Names of the variables an archive carries losslessly (not packed as fields), from its attributes; for reports, so never throws. */
export function carriedNames(attrs: Attrs): string[] {
  const list = attrs[KEY.carried];
  if (!Array.isArray(list)) return [];
  return list.map((t, i) => {
    try {
      return fromCarried(t, i).name;
    } catch {
      return `(entry ${i}: malformed)`;
    }
  });
}

/** NetCDF attributes from archive attributes: our own keys dropped, types from the stored "name=type" list. */
function ncAttrs(attrs: Attrs): { attrs: NcAttrs; types: Record<string, NcType> } {
  const types: Record<string, NcType> = {};
  const listed = attrs[KEY.attrTypes];
  if (Array.isArray(listed)) {
    for (const e of listed) {
      const m = typeof e === 'string' ? /^(.*)=(byte|char|short|int|float|double)$/.exec(e) : null;
      if (m) Object.defineProperty(types, m[1], { value: m[2], enumerable: true, writable: true, configurable: true });
    }
  }
  const out: NcAttrs = {};
  for (const [k, v] of Object.entries(attrs)) {
    if (k.startsWith('rankfield:')) continue;
    let value: NcAttrValue;
    if (typeof v === 'boolean') value = v ? 1 : 0;
    else if (Array.isArray(v)) value = v.every((x) => typeof x === 'number') ? (v as number[]) : v.map(String).join(', ');
    else value = v;
    Object.defineProperty(out, k, { value, enumerable: true, writable: true, configurable: true });
    if (typeof value === 'string') delete types[k];
  }
  for (const k of Object.keys(types)) if (!(k in out)) delete types[k];
  return { attrs: out, types };
}

/** The dimensions of a field for NetCDF output: its own names, or NAME_dim0, NAME_dim1, ... */
function fieldDims(h: FieldHeader, shape: number[]): string[] {
  if (h.dims && h.dims.length === shape.length) return h.dims;
  return shape.map((_, i) => `${h.name}_dim${i}`);
}

/** The values of a variable the archive carries (a coordinate variable, say), or null when it carries none of that name. */
export function carriedValues(archiveAttrs: Attrs, name: string): NcWriteValues | null {
  const list = archiveAttrs[KEY.carried];
  if (!Array.isArray(list)) return null;
  for (const [i, t] of list.entries()) {
    const v = fromCarried(t, i);
    if (v.name === name) return v.values;
  }
  return null;
}

/** The part of C-order `values` of `shape` within `ranges` (per axis; undefined: whole), as the same kind of array. */
function cutValues(values: NcWriteValues, shape: number[], ranges: ([number, number] | undefined)[]): NcWriteValues {
  const r = shape.map((n, i) => ranges[i] ?? ([0, n] as [number, number]));
  const n = r.reduce((x, [a, b]) => x * (b - a), 1);
  const stride = shape.map((_, i) => shape.slice(i + 1).reduce((x, y) => x * y, 1));
  const idx = r.map(([a]) => a);
  const pick: number[] = [];
  for (let e = 0; e < n; e++) {
    pick.push(idx.reduce((f, x, i) => f + x * stride[i], 0));
    for (let i = shape.length - 1; i >= 0 && ++idx[i] === r[i][1]; i--) idx[i] = r[i][0];
  }
  if (Array.isArray(values)) return pick.map((j) => values[j]) as NcWriteValues;
  const T = values.constructor as new (n: number) => typeof values;
  const out = new T(n);
  // Bits, not numbers, for floats: NaN payloads are kept.
  if (values instanceof Float32Array || values instanceof Float64Array) {
    const s = values instanceof Float32Array ? new Uint32Array(values.buffer, values.byteOffset, values.length) : new BigUint64Array(values.buffer, values.byteOffset, values.length);
    const d = values instanceof Float32Array ? new Uint32Array((out as Float32Array).buffer) : new BigUint64Array((out as Float64Array).buffer);
    pick.forEach((j, i) => void (d[i] = s[j]));
  } else pick.forEach((j, i) => void ((out as Int32Array)[i] = (values as Int32Array)[j]));
  return out;
}

/**
 * A NetCDF classic file of fields (shape = nd_shape, or a window of it),
 * with dims and attributes restored. `cut` maps the dimensions of a window
 * to their index ranges: those dimensions take the window's sizes, and the
 * carried variables along them (coordinate variables) are cut to match.
 */
export function netcdfFromFields(archiveAttrs: Attrs, fields: { h: FieldHeader; shape: number[]; values: Float32Array | Float64Array }[], cut?: Map<string, [number, number]>): NcWriteFile {
  const dims = new Map<string, number>();
  let unlimited = typeof archiveAttrs[KEY.unlimited] === 'string' ? (archiveAttrs[KEY.unlimited] as string) : null;
  // The source's dimensions, in its order (archives of NetCDF input carry them; older ones do not).
  const source = sourceDims(archiveAttrs[KEY.dims]);
  for (const d of source) {
    dims.set(d.name, d.size);
    if (d.unlimited) unlimited = d.name;
  }
  const carriedList = archiveAttrs[KEY.carried];
  const carried = Array.isArray(carriedList) ? carriedList.map((t, i) => fromCarried(t, i)) : [];
  if (cut && cut.size > 0) {
    for (const v of carried) {
      const shape = v.dims.map((d) => dims.get(d) ?? 0);
      if (v.dims.some((d) => cut.has(d))) v.values = cutValues(v.values, shape, v.dims.map((d) => cut.get(d)));
    }
    for (const [d, [a, b]] of cut) dims.set(d, b - a);
  }
  const packedVars: NcWriteVariable[] = fields.map(({ h, shape, values }) => {
    const names = fieldDims(h, h.nd_shape && h.nd_shape.length === shape.length ? h.nd_shape : shape);
    names.forEach((d, i) => {
      const had = dims.get(d);
      if (had !== undefined && had !== shape[i]) {
        throw new InputError(InputCode.Shape, `dimension '${printable(d)}' has size ${had} in one field and ${shape[i]} in field '${printable(h.name)}'; write the fields to separate .nc files with --var`);
      }
      dims.set(d, shape[i]);
    });
    const stored = storedVariable(h, values);
    if (stored) return { name: h.name, dims: names, ...stored };
    const { attrs, types } = ncAttrs(h.attrs);
    const type: NcType = h.dtype === 'f32' ? 'float' : 'double';
    delete attrs._FillValue;
    delete types._FillValue;
    if (h.fill !== null) {
      attrs._FillValue = h.fill;
      types._FillValue = type;
    }
    return { name: h.name, dims: names, type, attrs, attrTypes: types, values };
  });
  for (const v of carried) {
    const missing = v.dims.find((d) => !dims.has(d));
    if (missing !== undefined) throw new FormatError(FormatCode.Malformed, `archive attribute ${KEY.carried}: variable '${printable(v.name)}' uses dimension '${printable(missing)}', which the archive does not describe`);
    if (packedVars.some((p) => p.name === v.name)) throw new FormatError(FormatCode.Malformed, `archive attribute ${KEY.carried}: variable '${printable(v.name)}' is also a field`);
  }
  // The source's variable order, where the archive records it.
  const order = Array.isArray(archiveAttrs[KEY.order]) ? (archiveAttrs[KEY.order] as unknown[]) : [];
  const rank = (name: string): number => {
    const i = order.indexOf(name);
    return i < 0 ? order.length : i;
  };
  const variables = [...packedVars, ...carried].map((v, i) => ({ v, i })).sort((a, b) => rank(a.v.name) - rank(b.v.name) || a.i - b.i).map((x) => x.v);
  // The record dimension stays unlimited only where every variable using it has it first (the format's rule).
  const recordOk = unlimited !== null && dims.has(unlimited) && variables.every((v) => v.dims.indexOf(unlimited) <= 0);
  const g = ncAttrs(archiveAttrs);
  // NetCDF Users Guide, appendix "Attribute Conventions", history: each program that modifies a
  // file appends a line with date, time and program; CF conventions 1.x section 2.6.2 keeps it (from memory).
  const note = `${new Date().toISOString().replace(/\.\d+Z$/, 'Z')} rankfield ${VERSION_STRING} unpack: values decoded from a lossy archive (${fields.map(({ h }) => `${h.name} ${formatBound(h.bound)}`).join(', ')}), within those bounds of the originals, not the originals`;
  const history = g.attrs.history;
  setOwn<NcAttrValue>(g.attrs, 'history', typeof history === 'string' && history.length > 0 ? `${history.replace(/\n+$/, '')}\n${note}` : note);
  delete g.types.history;
  return {
    dims: [...dims].map(([name, size]) => ({ name, size, unlimited: recordOk && name === unlimited })),
    globalAttrs: g.attrs,
    globalAttrTypes: g.types,
    variables,
    // Names of NetCDF-4 groups' variables, dimensions and attributes are paths (G/NAME): written back into their groups.
    groupPaths: variables.some((v) => v.name.includes('/')) || [...dims.keys()].some((d) => d.includes('/')) || Object.keys(g.attrs).some((k) => k.includes('/')),
  };
}

/**
 * A field as the variable it was read from (stored type and own
 * attributes), for archives that record them; null for others. Archive
 * attributes are checked: a malformed record is a FormatError.
 */
function storedVariable(h: FieldHeader, values: Float32Array | Float64Array): { type: NcType; attrs: NcAttrs; attrTypes: Record<string, NcType>; values: NcWriteValues } | null {
  const text = h.attrs[KEY.storedAttrs];
  const type = h.attrs[KEY.storedType];
  if (text === undefined) return null;
  const bad = (why: string): never => {
    throw new FormatError(FormatCode.Malformed, `field '${printable(h.name)}' attribute ${KEY.storedAttrs}: ${why}`);
  };
  if (typeof text !== 'string' || typeof type !== 'string' || !(type in NC_TYPE_SIZE) || type === 'char') return bad(`needs a JSON list and ${KEY.storedType}, a numeric NetCDF type`);
  let list: unknown;
  try {
    list = JSON.parse(text);
  } catch {
    return bad('not valid JSON');
  }
  const { attrs, attrTypes } = attrsFromJson(list, bad);
  return { type: type as NcType, attrs, attrTypes, values: toStoredType(values, h.fill, type as NcType, attrs) };
}

/** Missing values of a field decoded for .npy, raw or CSV output: the cells of each missing-value mark get the value they held (see {@link KEY}.marks). In place. */
export { restoreMissing } from '../missing.js';

/** The source's dimension list from its JSON archive attribute, checked; [] when absent. */
function sourceDims(text: unknown): { name: string; size: number; unlimited: boolean }[] {
  if (text === undefined) return [];
  const bad = (): never => {
    throw new FormatError(FormatCode.Malformed, `archive attribute ${KEY.dims} is not a JSON list of { name, size, unlimited }`);
  };
  if (typeof text !== 'string') return bad();
  let o: unknown;
  try {
    o = JSON.parse(text);
  } catch {
    return bad();
  }
  if (!Array.isArray(o)) return bad();
  return o.map((d: unknown) => {
    const x = d as { name?: unknown; size?: unknown; unlimited?: unknown };
    if (d === null || typeof d !== 'object' || typeof x.name !== 'string' || typeof x.size !== 'number' || typeof x.unlimited !== 'boolean') return bad();
    return { name: x.name, size: x.size, unlimited: x.unlimited };
  });
}
