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
import type { NetcdfInput, StoredBits } from './netcdf-input.js';
import { NcVariableReader, readNetcdfHeader, type NcFile, type NcVariable, type StoredReader } from './netcdf-read.js';
import { NC_TYPE_SIZE, type NcAttrValue, type NcType } from './netcdf-types.js';
import { netcdfHeader, writeNetcdf, type NcWriteFile, type NcWriteValues, type NcWriteVariable } from './netcdf-write.js';

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
    return walk(file, path, () => false).model as NcWriteFile;
  } finally {
    file.close();
  }
}

/** A variable of the model whose values are still in the file: its dataset, read by hyperslabs. */
type Deferred = Omit<NcWriteVariable, 'values'> & { values?: NcWriteValues };

/**
 * The classic model of an open file (see the module comment). The values
 * of the datasets `defer` accepts are left in the file (their variables have
 * no `values`; `datasets` maps their names to them); every other
 * variable's values are read whole.
 */
function walk(file: H5File, path: string, defer: (d: H5Node, type: NcType) => boolean): { model: Omit<NcWriteFile, 'variables'> & { variables: Deferred[] }; datasets: Map<string, H5Node> } {
  const deferred = new Map<string, H5Node>();
  {
    // `open`: an unlimited dimension known only from its dimension-only scale, whose current size (0
    // when no variable of its own was written) is not its length: the first variable along it sets that.
    const dims = new Map<string, { size: number; unlimited: boolean; open?: boolean }>();
    const variables: Deferred[] = [];
    const datasets: H5Node[] = [];
    // Attributes of groups are kept as global attributes named by their path, G/NAME.
    const groupAttrs: ReturnType<typeof attributes>[] = [];
    const visit = (g: H5Node) => {
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
          visit(o);
        }
        else if (o.type === 'Dataset') datasets.push(o);
      }
    };
    visit(file);
    const isScale = (d: H5Node) => d.attrs.CLASS !== undefined && String(d.attrs.CLASS.value) === 'DIMENSION_SCALE';
    let record: string | null = null;
    for (const d of datasets.filter(isScale)) {
      const size = d.metadata.shape?.[0] ?? 0;
      const unlimited = (d.metadata.maxshape?.[0] ?? 0) > Number.MAX_SAFE_INTEGER;
      if (unlimited && record === null) record = flatName(d.path);
      const dimOnly = String(d.attrs.NAME?.value ?? '').startsWith(DIM_ONLY);
      dims.set(flatName(d.path), { size, unlimited: unlimited && record === flatName(d.path), open: unlimited && dimOnly });
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
        if (had?.open) {
          had.size = shape[i];
          had.open = false;
        } else if (had !== undefined && had.size !== shape[i]) fileError(path, `${where} has size ${shape[i]} along dimension '${dn}', which has size ${had.size}`);
        if (had === undefined) dims.set(dn, { size: shape[i], unlimited: false });
      });
      const { attrs, attrTypes } = attributes(d, path);
      if (!oneByteText && defer(d, type)) {
        deferred.set(name, d);
        variables.push({ name, dims: names, type, attrs, attrTypes });
        continue;
      }
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
    const model = {
      dims: [...dims].map(([name, d]) => ({ name, size: d.size, unlimited: name === rec })),
      globalAttrs: g.attrs,
      globalAttrTypes: g.attrTypes,
      variables,
      groupPaths: true,
    };
    return { model, datasets: deferred };
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

/**
 * The pieces of C-order positions [start, start + count) of an array of
 * `shape` as hyperslabs ([start, stop) per axis), in order: a partial
 * leading row, whole rows, a partial trailing row, recursively; at most two
 * per axis.
 */
export function flatPieces(shape: readonly number[], start: number, count: number): [number, number][][] {
  const out: [number, number][][] = [];
  const go = (axis: number, lead: [number, number][], a: number, b: number): void => {
    if (a >= b) return;
    if (axis === shape.length - 1) {
      out.push([...lead, [a, b]]);
      return;
    }
    const inner = shape.slice(axis + 1).reduce((x, y) => x * y, 1);
    let i0 = Math.floor(a / inner);
    let i1 = Math.ceil(b / inner); // rows [i0, i1) touched
    const whole = (i: number, j: number) => out.push([...lead, [i, j], ...shape.slice(axis + 1).map((d) => [0, d] as [number, number])]);
    if (i1 - i0 === 1) return go(axis + 1, [...lead, [i0, i0 + 1]], a - i0 * inner, b - i0 * inner);
    let tail: (() => void) | null = null;
    if (a % inner !== 0) {
      go(axis + 1, [...lead, [i0, i0 + 1]], a - i0 * inner, inner);
      i0++;
    }
    if (b % inner !== 0) {
      const last = i1 - 1;
      tail = () => go(axis + 1, [...lead, [last, last + 1]], 0, b - last * inner);
      i1--;
    }
    if (i1 > i0) whole(i0, i1);
    tail?.();
  };
  go(0, [], start, start + count);
  return out;
}

type H5Dataset = H5Node & { slice(ranges: [number, number][]): unknown };

/**
 * Largest compressed chunk read (bytes of values). HDF5 inflates a filtered
 * chunk whole into the WebAssembly heap for every read that touches it, so a
 * variable in larger compressed chunks cannot be read by bands in bounded
 * memory: it is refused (typical NetCDF-4 chunks take at most a few MiB).
 */
export const MAX_CHUNK_BYTES = 64 << 20;

/** Largest number of values one hyperslab read asks HDF5 for (its buffer lives in the WebAssembly heap, which never shrinks). */
const MAX_SLAB_VALUES = 1 << 21;

/** A NetCDF-4 / HDF5 file open through h5wasm, its large variables read by hyperslabs. */
class Netcdf4Input implements NetcdfInput {
  readonly bytesRead = 0;
  readonly stored: StoredReader;
  private open = true;

  constructor(
    readonly path: string,
    private readonly h5file: H5File,
    readonly file: NcFile,
    private readonly values: Map<string, NcWriteValues>,
    private readonly datasets: Map<string, H5Node>,
  ) {
    this.stored = (v, start, count, unsigned, out) => this.readStored(v, start, count, unsigned, out);
  }

  private dataset(v: NcVariable): H5Dataset | null {
    if (!this.open) throw new InputError(InputCode.Option, `${this.path}: read after the file was closed`);
    return (this.datasets.get(v.name) as H5Dataset | undefined) ?? null;
  }

  /** Values of a deferred variable at C-order positions [start, start + count), as the classic model's numbers. */
  private readStored(v: NcVariable, start: number, count: number, unsigned: boolean, out: Float32Array | Float64Array): void {
    const d = this.dataset(v);
    const wrap = 2 ** (8 * NC_TYPE_SIZE[v.type]);
    const put = (src: ArrayLike<number | bigint>, at: number, where: string) => {
      for (let i = 0; i < src.length; i++) {
        let x = src[i];
        if (typeof x === 'bigint') {
          if (x > BigInt(Number.MAX_SAFE_INTEGER) || x < -BigInt(Number.MAX_SAFE_INTEGER)) fileError(this.path, `${where} holds ${x}, beyond 2^53, which double cannot hold exactly`);
          x = Number(x);
        }
        // As a classic reader reads an integer type's bits unsigned (_Unsigned = "true").
        out[at + i] = unsigned && x < 0 ? x + wrap : x;
      }
    };
    const where = `variable '/${v.name}'`;
    if (d === null) {
      // A variable read whole at open (small: coordinates and the like).
      const all = this.values.get(v.name);
      if (all === undefined || typeof all[0] === 'string') throw new InputError(InputCode.Option, `${this.path}: ${where} has no numeric values`);
      put(Array.prototype.slice.call(all, start, start + count) as number[], 0, where);
      return;
    }
    const shape = v.shape;
    let at = 0;
    for (const piece of flatPieces(shape, start, count)) {
      // A piece too large for one buffer is cut along its first axis of more than one index.
      const size = piece.reduce((a, [x, y]) => a * (y - x), 1);
      const axis = piece.findIndex(([x, y]) => y - x > 1);
      const per = axis < 0 ? 1 : size / (piece[axis][1] - piece[axis][0]);
      const step = axis < 0 ? 1 : Math.max(1, Math.floor(MAX_SLAB_VALUES / per));
      const [lo, hi] = axis < 0 ? [0, 1] : piece[axis];
      for (let i = lo; i < hi; i += step) {
        const part = axis < 0 ? piece : piece.map((r, k) => (k === axis ? ([i, Math.min(hi, i + step)] as [number, number]) : r));
        let got: unknown;
        try {
          got = d.slice(part);
        } catch (e) {
          fileError(this.path, `${where}: cannot read its values (${hdf5Failure(e)})`);
        }
        const list = got as ArrayLike<number | bigint>;
        put(list, at, where);
        at += list.length;
      }
    }
    if (at !== count) throw new Error(`HDF5 hyperslabs gave ${at} values, not ${count}`);
  }

  storedBits(v: NcVariable): StoredBits {
    const have = this.values.get(v.name);
    if (have !== undefined) {
      if (ArrayBuffer.isView(have)) return have;
      // Numbers given as a list (not made by walk, which gives typed arrays): to the classic type's array.
      const list = have as number[];
      return v.type === 'byte' ? Int8Array.from(list) : v.type === 'short' ? Int16Array.from(list) : v.type === 'int' ? Int32Array.from(list) : v.type === 'float' ? Float32Array.from(list) : Float64Array.from(list);
    }
    const n = v.shape.reduce((a, b) => a * b, 1);
    const out = v.type === 'float' ? new Float32Array(n) : new Float64Array(n);
    this.readStored(v, 0, n, false, out);
    return v.type === 'byte' ? Int8Array.from(out) : v.type === 'short' ? Int16Array.from(out) : v.type === 'int' ? Int32Array.from(out) : out;
  }

  variable(name: string, options: { mark?: boolean } = {}): NcVariableReader {
    const reader = new NcVariableReader(this.stored, this.file, name, options);
    const d = this.datasets.get(name) as (H5Dataset & { filters?: unknown[] }) | undefined;
    const chunks = (d?.metadata as { chunks?: number[] | null } | undefined)?.chunks;
    if (d !== undefined && Array.isArray(chunks)) {
      const bytes = chunks.reduce((a, b) => a * Number(b), 1) * d.metadata.size;
      if (bytes > MAX_CHUNK_BYTES && Array.isArray(d.filters) && d.filters.length > 0) {
        fileError(this.path, `variable '/${name}' is stored in compressed chunks of ${bytes} bytes (${chunks.join(' x ')}), which HDF5 inflates whole for every read; rankfield reads such variables by bands only from chunks of at most ${MAX_CHUNK_BYTES} bytes: rechunk it first (for example nccopy -c with smaller chunks, or nccopy -d 0 to store it uncompressed)`);
      }
    }
    return reader;
  }

  close(): void {
    if (!this.open) return;
    this.open = false;
    this.h5file.close();
  }
}

/**
 * Open a NetCDF-4 / HDF5 file for band reads: its structure and attributes
 * are read, and the values of variables that are not fields (coordinates,
 * text: fewer than 2 dimensions, or an empty one); a field's values stay in
 * the file and are read by hyperslabs (h5wasm's Node build reads the file
 * where it lies, through the file system, never copying it whole). The
 * header is the one {@link netcdf4ToClassic} would write, so packing from
 * it gives the same archive. The caller closes it.
 */
export async function openNetcdf4Input(path: string): Promise<NetcdfInput> {
  const lib = await h5();
  let file: H5File;
  try {
    file = new lib.File(path, 'r') as unknown as H5File;
    if (!(file.file_id >= 0n)) throw new Error('cannot open');
  } catch (e) {
    return fileError(path, `not a readable HDF5 file (${hdf5Failure(e)})`);
  }
  try {
    let walked: ReturnType<typeof walk>;
    try {
      walked = walk(file, path, (d) => {
        const shape = d.metadata.shape ?? [];
        return shape.length >= 2 && shape.every((n) => n > 0);
      });
    } catch (e) {
      if (e instanceof InputError) throw e;
      return fileError(path, `not a readable HDF5 file (${hdf5Failure(e)})`);
    }
    const { model, datasets } = walked;
    let header: ReturnType<typeof netcdfHeader>;
    try {
      header = netcdfHeader(model);
    } catch (e) {
      if (e instanceof InputError) throw new InputError(e.code, `${path}: ${e.message}`);
      throw e;
    }
    // The classic header, parsed as the classic reader parses it, over a file of the size it declares (the data part reads as zeros).
    const { header: bytes, layout } = header;
    const zeros = new Uint8Array(0);
    const virtual = {
      size: layout.totalBytes,
      read: (offset: number, length: number) => {
        const out = offset + length <= bytes.length ? bytes.subarray(offset, offset + length) : zeros;
        if (out.length === length) return out;
        const pad = new Uint8Array(length);
        if (offset < bytes.length) pad.set(bytes.subarray(offset, Math.min(bytes.length, offset + length)));
        return pad;
      },
    };
    const nc = readNetcdfHeader(virtual, path);
    const values = new Map<string, NcWriteValues>();
    for (const v of model.variables) if (v.values !== undefined) values.set(v.name, v.values);
    return new Netcdf4Input(path, file, nc, values, datasets);
  } catch (e) {
    file.close();
    throw e;
  }
}
