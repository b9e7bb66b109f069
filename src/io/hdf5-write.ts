/**
 * Writing the NetCDF classic model ({@link NcWriteFile}) as a NetCDF-4 file
 * (HDF5 inside) through h5wasm, laid out as the netCDF library lays out its
 * own (NetCDF Users Guide, "NetCDF-4 Format", from memory): every dimension
 * a dimension scale (its coordinate variable, or a dimension-only dataset
 * whose NAME begins "This is a netCDF dimension but not a netCDF
 * variable"), every variable a dataset with the scales of its dimensions
 * attached, the unlimited dimension of unlimited maximum size (its
 * variables chunked a record at a time), text attributes as fixed-length
 * strings (read back as char), links kept in creation order. Names that
 * are group paths (`groupPaths`: 'G/H/NAME') go into their groups, made as
 * the netCDF library makes groups: HDF5 groups, each dimension a scale in
 * the group that defines it.
 */
import { InputCode, InputError } from '../errors.js';
import { h5, hdf5Failure, type H5 } from './hdf5-read.js';
import type { NcAttrValue, NcType } from './netcdf-types.js';
import type { NcWriteFile, NcWriteValues } from './netcdf-write.js';

type H5Dataset = {
  make_scale(name?: string): void;
  attach_scale(index: number, path: string): void;
  create_attribute(name: string, data: unknown, shape?: number[] | null, dtype?: string | null): void;
};
type H5File = H5Dataset & {
  create_group(name: string, track_order?: boolean): unknown;
  get(name: string): unknown;
  create_dataset(a: { name: string; data: unknown; shape: number[]; dtype: string; maxshape?: (number | null)[]; chunks?: number[] }): H5Dataset;
  close(): void;
};

const DTYPE: Record<NcType, string> = { byte: '<b', char: 'S1', short: '<h', int: '<i', float: '<f', double: '<d' };
const DIM_ONLY = 'This is a netCDF dimension but not a netCDF variable.';

/** Values as the typed array (or one-character strings, for char) h5wasm writes for `type`. */
function data(values: NcWriteValues, type: NcType): unknown {
  if (type === 'char') {
    if (values instanceof Uint8Array) return Array.from(values, (b) => String.fromCharCode(b));
    return Array.from(values as ArrayLike<unknown>, (x) => String(x));
  }
  const list = values as ArrayLike<number>;
  switch (type) {
    case 'byte':
      return values instanceof Int8Array ? values : Int8Array.from(list);
    case 'short':
      return values instanceof Int16Array ? values : Int16Array.from(list);
    case 'int':
      return values instanceof Int32Array ? values : Int32Array.from(list);
    case 'float':
      return values instanceof Float32Array ? values : Float32Array.from(list);
    default:
      return values instanceof Float64Array ? values : Float64Array.from(list);
  }
}

/** Attach attributes: text as a fixed-length string, numbers as a 1-D array of their type. */
function putAttrs(target: H5Dataset, attrs: Record<string, NcAttrValue>, types: Record<string, NcType> | undefined): void {
  for (const [name, v] of Object.entries(attrs)) {
    if (typeof v === 'string') {
      target.create_attribute(name, v, null, `S${Math.max(1, Buffer.byteLength(v, 'utf8'))}`);
      continue;
    }
    const list = Array.isArray(v) ? v : [v];
    const t: NcType = types?.[name] ?? 'double';
    target.create_attribute(name, data(list, t === 'char' ? 'double' : t), [list.length], DTYPE[t === 'char' ? 'double' : t]);
  }
}

/** Write `file` as NetCDF-4 at `path` (a new file; the caller publishes it). */
export async function writeNetcdf4(path: string, file: NcWriteFile): Promise<void> {
  const lib = await h5();
  try {
    write(lib, path, file);
  } catch (e) {
    if (e instanceof InputError) throw e;
    throw new InputError(InputCode.File, `${path}: the HDF5 library could not write it (${hdf5Failure(e)})`);
  }
}

/** {@link writeNetcdf4}: creates, fills and closes the file. */
function write(lib: H5, path: string, file: NcWriteFile): void {
  const out = new lib.File(path, 'w', { track_order: true }) as unknown as H5File;
  try {
    const unlimited = file.dims.find((d) => d.unlimited)?.name;
    const size = new Map(file.dims.map((d) => [d.name, d.size]));
    const layout = (dims: string[]) => {
      if (unlimited === undefined || dims[0] !== unlimited) return {};
      return { maxshape: dims.map((d, i) => (i === 0 ? null : size.get(d)!)), chunks: dims.map((d, i) => (i === 0 ? 1 : Math.max(1, size.get(d)!))) };
    };
    const coordinate = (d: string) => file.variables.find((v) => v.name === d && v.dims.length === 1 && v.dims[0] === d);
    // Groups: a name 'G/H/NAME' (file.groupPaths) goes into group /G/H, created in order of first use.
    const made = new Set<string>();
    for (const name of [...file.dims.map((d) => d.name), ...file.variables.map((v) => v.name), ...Object.keys(file.globalAttrs)]) {
      if (!file.groupPaths || !name.includes('/')) continue;
      const parts = name.split('/');
      for (let i = 1; i < parts.length; i++) {
        const g = parts.slice(0, i).join('/');
        if (!made.has(g)) out.create_group(g, true);
        made.add(g);
      }
    }
    const base = (name: string) => name.slice(name.lastIndexOf('/') + 1);
    for (const d of file.dims) {
      const v = coordinate(d.name);
      const shape = [d.size];
      const ds = v
        ? out.create_dataset({ name: d.name, data: data(v.values, v.type), shape, dtype: DTYPE[v.type], ...layout([d.name]) })
        : out.create_dataset({ name: d.name, data: new Float32Array(d.size), shape, dtype: '<f', ...layout([d.name]) });
      ds.make_scale(v ? base(d.name) : `${DIM_ONLY}${String(d.size).padStart(10)}`);
      if (v) putAttrs(ds, v.attrs, v.attrTypes);
    }
    for (const v of file.variables) {
      if (coordinate(v.name) === v) continue;
      if (size.has(v.name)) throw new InputError(InputCode.Option, `variable '${v.name}' has the name of a dimension it is not the coordinate of; NetCDF-4 cannot hold that (write NetCDF classic)`);
      const shape = v.dims.map((d) => size.get(d)!);
      const ds = out.create_dataset({ name: v.name, data: data(v.values, v.type), shape, dtype: DTYPE[v.type], ...layout(v.dims) });
      v.dims.forEach((d, i) => ds.attach_scale(i, `/${d}`));
      putAttrs(ds, v.attrs, v.attrTypes);
    }
    // A global attribute named G/NAME (groupPaths) is attribute NAME of group /G.
    const own: Record<string, NcAttrValue> = {};
    const byGroup = new Map<string, Record<string, NcAttrValue>>();
    for (const [name, v] of Object.entries(file.globalAttrs)) {
      const at = file.groupPaths ? name.lastIndexOf('/') : -1;
      const target = at < 0 ? own : (byGroup.get(name.slice(0, at)) ?? byGroup.set(name.slice(0, at), {}).get(name.slice(0, at))!);
      Object.defineProperty(target, at < 0 ? name : name.slice(at + 1), { value: v, enumerable: true, writable: true, configurable: true });
    }
    const typeOf = (prefix: string) => Object.fromEntries(Object.entries(file.globalAttrTypes ?? {}).filter(([k]) => (prefix === '' ? !k.includes('/') : k.startsWith(prefix) && !k.slice(prefix.length).includes('/'))).map(([k, t]) => [k.slice(prefix.length), t]));
    putAttrs(out, own, file.groupPaths ? typeOf('') : file.globalAttrTypes);
    for (const [g, attrs] of byGroup) putAttrs(out.get(g) as H5Dataset, attrs, typeOf(`${g}/`));
  } finally {
    out.close();
  }
}
