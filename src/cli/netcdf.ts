/**
 * The command line's NetCDF side: choosing the variables of a NetCDF
 * classic or 64-bit-offset file and their layouts for `pack`, and building
 * a NetCDF classic file from an archive's fields for `unpack -o OUT.nc`.
 */
import { InputCode, InputError, type Attrs, type FieldHeader } from '../index.js';
import { readNetcdfHeader, readNetcdfVariable, physicalAttributes, type NcAttrs, type NcAttrValue, type NcFile, type NcType, type NcValues } from '../io/netcdf-read.js';
import type { NcWriteFile, NcWriteVariable } from '../io/netcdf-write.js';
import { layoutGrid, printable } from '../format/schema.js';
import { UsageError } from './errors.js';

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
} as const;

/** True when a path names a NetCDF file (case-insensitive extension .nc). */
export function isNetcdfPath(path: string): boolean {
  return /\.nc$/i.test(path);
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

/** One variable, read and laid out for packing. */
export interface NcField {
  name: string;
  read: NcValues;
  rows: number;
  cols: number;
  slices: number;
  layout: string | undefined;
  attrs: Attrs;
}

function typesText(types: Record<string, NcType>): string[] {
  return Object.entries(types).map(([k, t]) => `${k}=${t}`);
}

/**
 * The variables to pack: those named by `--var` (in the order given), else
 * every numeric variable of two or more non-empty dimensions. `matrix`
 * (from --matrix) lays out every variable whose leading dimensions are
 * those names as 'matrix:A'; the others get the default layout.
 */
export function netcdfFields(bytes: Uint8Array, path: string, vars: string[] | undefined, matrix: string[] | undefined): { file: NcFile; fields: NcField[]; archiveAttrs: Attrs } {
  const file = readNetcdfHeader(bytes, path);
  let names: string[];
  if (vars && vars.length > 0) {
    const seen = new Set<string>();
    for (const v of vars) {
      if (seen.has(v)) throw new UsageError(`--var '${printable(v)}' is given twice`);
      seen.add(v);
    }
    names = vars;
  } else {
    names = file.variables.filter((v) => v.type !== 'char' && v.shape.length >= 2 && v.shape.every((d) => d > 0)).map((v) => v.name);
    if (names.length === 0) throw new InputError(InputCode.Shape, `${path}: no numeric variable of 2 or more dimensions to pack (variables: ${file.variables.map((v) => `${v.name}(${v.dims.join(', ')})`).join(', ') || 'none'})`);
  }
  const fields = names.map((name) => {
    let read: NcValues;
    try {
      read = readNetcdfVariable(bytes, file, name);
    } catch (e) {
      if (e instanceof InputError) throw new InputError(e.code, `${path}: ${e.message}`);
      throw e;
    }
    const v = file.variables.find((x) => x.name === name)!;
    const k = read.shape.length;
    const lead = matrix && matrix.length < k && matrix.every((d, i) => read.dims[i] === d) ? matrix.length : 0;
    const layout = lead > 0 ? `matrix:${lead}` : k > 2 ? 'slices' : undefined;
    const g = layout ? (layoutGrid(read.shape, layout) as { slices: number; rows: number; cols: number }) : { slices: 1, rows: read.shape[0], cols: read.shape[1] };
    const phys = physicalAttributes(v, read);
    const attrs: Attrs = { ...(phys.attrs as Attrs) };
    attrs[KEY.attrTypes] = typesText(phys.attrTypes);
    attrs[KEY.storedType] = read.storedType;
    if (read.unpacked && read.packing) {
      attrs[KEY.unpacked] = true;
      attrs[KEY.packing] = [read.packing.scale, read.packing.offset];
    }
    return { name, read, rows: g.rows, cols: g.cols, slices: g.slices, layout, attrs };
  });
  if (matrix && !fields.some((f) => f.layout?.startsWith('matrix:'))) {
    throw new UsageError(`--matrix ${matrix.join(',')}:...: no variable packed has leading dimensions (${matrix.join(', ')}) followed by more`);
  }
  const archiveAttrs: Attrs = { ...(file.globalAttrs as Attrs) };
  archiveAttrs[KEY.attrTypes] = typesText(file.globalAttrTypes);
  archiveAttrs[KEY.format] = file.format;
  const unlimited = file.dims.find((d) => d.unlimited);
  if (unlimited) archiveAttrs[KEY.unlimited] = unlimited.name;
  return { file, fields, archiveAttrs };
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

/** A NetCDF classic file of whole fields (shape = nd_shape), with dims and attributes restored. */
export function netcdfFromFields(archiveAttrs: Attrs, fields: { h: FieldHeader; shape: number[]; values: Float32Array | Float64Array }[]): NcWriteFile {
  const dims = new Map<string, number>();
  const unlimited = typeof archiveAttrs[KEY.unlimited] === 'string' ? (archiveAttrs[KEY.unlimited] as string) : null;
  const variables: NcWriteVariable[] = fields.map(({ h, shape, values }) => {
    const names = fieldDims(h, shape);
    names.forEach((d, i) => {
      const had = dims.get(d);
      if (had !== undefined && had !== shape[i]) {
        throw new InputError(InputCode.Shape, `dimension '${printable(d)}' has size ${had} in one field and ${shape[i]} in field '${printable(h.name)}'; write the fields to separate .nc files with --var`);
      }
      dims.set(d, shape[i]);
    });
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
  // The record dimension stays unlimited only where every variable using it has it first (the format's rule).
  const recordOk = unlimited !== null && dims.has(unlimited) && variables.every((v) => v.dims.indexOf(unlimited) <= 0);
  const g = ncAttrs(archiveAttrs);
  return {
    dims: [...dims].map(([name, size]) => ({ name, size, unlimited: recordOk && name === unlimited })),
    globalAttrs: g.attrs,
    globalAttrTypes: g.types,
    variables,
  };
}
