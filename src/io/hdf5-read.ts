/**
 * NetCDF-4 and other HDF5 files, read through h5wasm (the HDF5 C library
 * compiled to WebAssembly, so chunked and deflate-compressed datasets read
 * as the library reads them) and turned into the NetCDF classic model that
 * the rest of rankfield reads: one {@link NcWriteFile}, which
 * {@link netcdf4ToClassic} writes as classic bytes.
 *
 * The mapping follows the NetCDF-4 format's use of HDF5 (NetCDF Users
 * Guide, "NetCDF-4 Format" / "HDF5 dimension scales", from memory):
 *  - a dataset is a variable; a dimension is a dimension-scale dataset, and
 *    one whose NAME attribute begins "This is a netCDF dimension but not a
 *    netCDF variable" is only a dimension; a variable's dimensions are the
 *    scales its DIMENSION_LIST attribute refers to. A dataset without one
 *    (a plain HDF5 file) gets dimensions named VAR_dim0, VAR_dim1, ...
 *  - the bookkeeping attributes (CLASS, NAME, REFERENCE_LIST,
 *    DIMENSION_LIST, _Netcdf4Coordinates, _Netcdf4Dimid, _NCProperties,
 *    _nc3_strict) are dropped; every other attribute is kept with its type.
 *  - groups: a variable or dimension of group G is named by its path
 *    without the leading '/', G/NAME (nested groups G/H/NAME); NetCDF names
 *    cannot hold '/', so a name without one is of the root group. The
 *    model's `groupPaths` says so (classic files have no groups). A
 *    group's attributes are global attributes named G/NAME likewise.
 *  - types beyond the classic ones are widened exactly: unsigned byte to
 *    short, unsigned short to int, 32- and 64-bit unsigned and 64-bit
 *    integers to double (refused beyond 2^53, where double is inexact);
 *    string variables and compound, enum or other types are refused.
 *  - the first dimension whose maximum size is unlimited becomes the record
 *    dimension (classic files have at most one).
 */
import { InputCode, InputError } from '../errors.js';
import type { NcAttrValue, NcType } from './netcdf-types.js';
import { writeNetcdf, type NcWriteFile, type NcWriteValues, type NcWriteVariable } from './netcdf-write.js';

/** HDF5 datatype classes (H5Tpublic.h, from memory): 0 integer, 1 float, 3 string. */
const H5T_INTEGER = 0;
const H5T_FLOAT = 1;
const H5T_STRING = 3;
/** Attributes of the NetCDF-4 and dimension-scale bookkeeping. */
const HIDDEN = new Set(['CLASS', 'NAME', 'REFERENCE_LIST', 'DIMENSION_LIST', '_Netcdf4Coordinates', '_Netcdf4Dimid', '_NCProperties', '_nc3_strict', '_IsNetcdf4']);
const DIM_ONLY = 'This is a netCDF dimension but not a netCDF variable';

/** The h5wasm module (Node build). */
export type H5 = typeof import('h5wasm/node').default;
type Meta = { type: number; size: number; signed: boolean; vlen?: boolean; maxshape: number[] | null; shape: number[] | null };
type H5Attr = { metadata: Meta; value: unknown };
type H5Node = {
  path: string;
  type: string;
  attrs: Record<string, H5Attr>;
  keys?: () => string[];
  get?: (name: string) => H5Node | null;
  metadata: Meta;
  value?: unknown;
  shape?: number[] | null;
};

let loading: Promise<H5> | null = null;

/**
 * h5wasm, loaded once for reading and writing (its WebAssembly module takes
 * a moment to start). The HDF5 library's automatic error report is switched
 * to h5wasm's throwing handler (`activate_throwing_error_handler`, h5wasm
 * 0.7.2 and later): a failing HDF5 call throws an Error whose message is the
 * error stack the library would otherwise print to stderr, so nothing of it
 * reaches the terminal and {@link hdf5Reason} makes one line of it.
 */
export async function h5(): Promise<H5> {
  loading ??= import('h5wasm/node').then(async (m) => {
    const module = await m.default.ready;
    module.activate_throwing_error_handler();
    return m.default;
  });
  return loading;
}

/** The message of a caught HDF5 failure, as one line: the innermost complaint of its error stack, or the error's own text. */
export function hdf5Failure(e: unknown): string {
  const text = e instanceof Error ? e.message : String(e);
  return /HDF5-DIAG|#000:/.test(text) ? hdf5Reason(text) : text.split('\n')[0];
}

/** The innermost HDF5 complaint of an error stack, e.g. "H5Fopen(): unable to synchronously open file". */
export function hdf5Reason(stack: string): string {
  const m = /#000: .* in (\w+\(\)): (.*)$/m.exec(stack);
  return m ? `${m[1]}: ${m[2].trim()}` : 'the HDF5 library refused it';
}

function fileError(path: string, what: string): never {
  throw new InputError(InputCode.File, `${path}: ${what}`);
}

/** The classic type holding an HDF5 numeric type exactly, or null. */
function classicType(m: Meta): NcType | null {
  if (m.type === H5T_FLOAT) return m.size === 4 ? 'float' : m.size === 8 ? 'double' : null;
  if (m.type !== H5T_INTEGER) return null;
  if (m.signed) return m.size === 1 ? 'byte' : m.size === 2 ? 'short' : m.size === 4 ? 'int' : m.size === 8 ? 'double' : null;
  return m.size === 1 ? 'short' : m.size === 2 ? 'int' : m.size === 4 || m.size === 8 ? 'double' : null;
}

/** Numbers of an HDF5 value (typed array, bigint array, number), checked to be exact in double. */
function numbers(v: unknown, where: string, path: string): number[] {
  const list = ArrayBuffer.isView(v) || Array.isArray(v) ? Array.from(v as ArrayLike<number | bigint>) : [v as number | bigint];
  return list.map((x) => {
    if (typeof x === 'bigint') {
      if (x > BigInt(Number.MAX_SAFE_INTEGER) || x < -BigInt(Number.MAX_SAFE_INTEGER)) fileError(path, `${where} holds ${x}, beyond 2^53, which double cannot hold exactly`);
      return Number(x);
    }
    if (typeof x !== 'number') fileError(path, `${where} is not numeric`);
    return x;
  });
}

/** Values of a variable in the typed array of its classic type. */
function typedValues(v: unknown, type: NcType, where: string, path: string): NcWriteValues {
  if (type === 'float' && v instanceof Float32Array) return v;
  if (type === 'double' && v instanceof Float64Array) return v;
  const n = numbers(v, where, path);
  return type === 'byte' ? Int8Array.from(n) : type === 'short' ? Int16Array.from(n) : type === 'int' ? Int32Array.from(n) : type === 'float' ? Float32Array.from(n) : Float64Array.from(n);
}

/** The bytes of a char variable that h5wasm gives as one-character strings ('' for a zero byte). */
function charBytes(v: unknown, where: string, path: string): Uint8Array {
  const list = Array.isArray(v) ? v : [v];
  const out = new Uint8Array(list.length);
  list.forEach((x, i) => {
    const text = String(x);
    if (text.length > 1 || text.charCodeAt(0) > 0xff) fileError(path, `${where} holds a character that is not one byte`);
    out[i] = text.length === 0 ? 0 : text.charCodeAt(0);
  });
  return out;
}

/** Attributes of a node, without the bookkeeping ones, each with its classic type. */
function attributes(node: H5Node, path: string): { attrs: Record<string, NcAttrValue>; attrTypes: Record<string, NcType> } {
  const attrs: Record<string, NcAttrValue> = {};
  const attrTypes: Record<string, NcType> = {};
  for (const [name, a] of Object.entries(node.attrs)) {
    if (HIDDEN.has(name)) continue;
    const where = `attribute '${name}' of '${node.path}'`;
    let value: NcAttrValue;
    let type: NcType;
    if (a.metadata.type === H5T_STRING) {
      const v = a.value;
      value = Array.isArray(v) ? v.map(String).join(', ') : String(v);
      type = 'char';
    } else {
      const t = classicType(a.metadata);
      if (t === null) fileError(path, `${where} has an HDF5 type that NetCDF classic cannot hold (class ${a.metadata.type}, ${a.metadata.size} bytes)`);
      const n = numbers(a.value, where, path);
      value = n.length === 1 ? n[0] : n;
      type = t;
    }
    Object.defineProperty(attrs, name, { value, enumerable: true, writable: true, configurable: true });
    Object.defineProperty(attrTypes, name, { value: type, enumerable: true, writable: true, configurable: true });
  }
  return { attrs, attrTypes };
}

/** The model's name of an HDF5 path: the path without the leading '/', groups kept as 'G/H/NAME'. */
function flatName(path: string): string {
  return path.replace(/^\/+/, '').replace(/\/+/g, '/');
}

/**
 * Read a NetCDF-4 or HDF5 file at `path` into the classic model (see the
 * module comment). Refuses, with an InputError naming the object, what
 * classic files cannot hold.
 */
export async function readHdf5AsClassic(path: string): Promise<NcWriteFile> {
  const lib = await h5();
  try {
    return readOpen(lib, path);
  } catch (e) {
    if (e instanceof InputError) throw e;
    return fileError(path, `not a readable HDF5 file (${hdf5Failure(e)})`);
  }
}

type H5File = H5Node & { file_id: bigint; close(): void; dereference(r: unknown): { path: string } | null };

/** {@link readHdf5AsClassic}: opens, walks and closes the file. */
function readOpen(lib: H5, path: string): NcWriteFile {
  const file = new lib.File(path, 'r') as unknown as H5File;
  if (!(file.file_id >= 0n)) throw new Error('cannot open');
  try {
    const dims = new Map<string, { size: number; unlimited: boolean }>();
    const variables: NcWriteVariable[] = [];
    const datasets: H5Node[] = [];
    // Attributes of groups are kept as global attributes named by their path, G/NAME.
    const groupAttrs: ReturnType<typeof attributes>[] = [];
    const walk = (g: H5Node) => {
      for (const k of g.keys!()) {
        const o = g.get!(k);
        if (o === null) continue;
        if (o.type === 'Group') {
          const own = attributes(o, path);
          const prefix = `${flatName(o.path)}/`;
          const named = { attrs: {} as Record<string, NcAttrValue>, attrTypes: {} as Record<string, NcType> };
          for (const [name, v] of Object.entries(own.attrs)) {
            Object.defineProperty(named.attrs, prefix + name, { value: v, enumerable: true, writable: true, configurable: true });
            Object.defineProperty(named.attrTypes, prefix + name, { value: own.attrTypes[name], enumerable: true, writable: true, configurable: true });
          }
          groupAttrs.push(named);
          walk(o);
        }
        else if (o.type === 'Dataset') datasets.push(o);
      }
    };
    walk(file);
    const isScale = (d: H5Node) => d.attrs.CLASS !== undefined && String(d.attrs.CLASS.value) === 'DIMENSION_SCALE';
    let record: string | null = null;
    for (const d of datasets.filter(isScale)) {
      const size = d.metadata.shape?.[0] ?? 0;
      const unlimited = (d.metadata.maxshape?.[0] ?? 0) > Number.MAX_SAFE_INTEGER;
      if (unlimited && record === null) record = flatName(d.path);
      dims.set(flatName(d.path), { size, unlimited: unlimited && record === flatName(d.path) });
    }
    for (const d of datasets) {
      const name = flatName(d.path);
      if (isScale(d) && String(d.attrs.NAME?.value ?? '').startsWith(DIM_ONLY)) continue;
      const where = `variable '${d.path}'`;
      // NetCDF-4 stores a char variable as HDF5 strings of one byte each (netCDF User's Guide, "NetCDF-4 format": NC_CHAR; from memory): the classic char type.
      const oneByteText = d.metadata.type === H5T_STRING && d.metadata.size === 1 && !d.metadata.vlen;
      if (d.metadata.type === H5T_STRING && !oneByteText) fileError(path, `${where} holds strings (NetCDF-4 type string), which rankfield does not carry: remove the variable first (for example with nccopy -V listing the others)`);
      const type = oneByteText ? 'char' : classicType(d.metadata);
      if (type === null) fileError(path, `${where} has an HDF5 type that NetCDF classic cannot hold (class ${d.metadata.type}, ${d.metadata.size} bytes)`);
      const shape = d.metadata.shape ?? [];
      let names: string[];
      const list = d.attrs.DIMENSION_LIST?.value;
      if (Array.isArray(list) && list.length === shape.length) {
        names = list.map((refs: unknown, i) => {
          const ref = Array.isArray(refs) ? refs[0] : refs;
          const target = ref === undefined ? null : file.dereference(ref);
          return target === null ? `${name}_dim${i}` : flatName(target.path);
        });
      } else if (isScale(d)) names = [name];
      else names = shape.map((_, i) => `${name}_dim${i}`);
      names.forEach((dn, i) => {
        const had = dims.get(dn);
        if (had !== undefined && had.size !== shape[i]) fileError(path, `${where} has size ${shape[i]} along dimension '${dn}', which has size ${had.size}`);
        if (had === undefined) dims.set(dn, { size: shape[i], unlimited: false });
      });
      const { attrs, attrTypes } = attributes(d, path);
      const values = oneByteText ? charBytes(d.value, where, path) : typedValues(d.value, type, where, path);
      variables.push({ name, dims: names, type, attrs, attrTypes, values });
    }
    // The record dimension stays unlimited only where every variable using it has it first (the classic format's rule).
    const rec = record !== null && variables.every((v) => v.dims.indexOf(record!) <= 0) ? record : null;
    const g = attributes(file, path);
    for (const a of groupAttrs) {
      Object.assign(g.attrs, a.attrs);
      Object.assign(g.attrTypes, a.attrTypes);
    }
    return {
      dims: [...dims].map(([name, d]) => ({ name, size: d.size, unlimited: name === rec })),
      globalAttrs: g.attrs,
      globalAttrTypes: g.attrTypes,
      variables,
      groupPaths: true,
    };
  } finally {
    file.close();
  }
}

/**
 * A NetCDF-4 / HDF5 file as the bytes of the NetCDF classic file that holds
 * the same (see the module comment); variables and dimensions of groups keep
 * their paths as names, which only rankfield's own classic reader takes.
 */
export async function netcdf4ToClassic(path: string): Promise<Uint8Array> {
  const f = await readHdf5AsClassic(path);
  try {
    return writeNetcdf(f);
  } catch (e) {
    if (e instanceof InputError) throw new InputError(e.code, `${path}: ${e.message}`);
    throw e;
  }
}
