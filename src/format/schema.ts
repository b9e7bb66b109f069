/**
 * The header and index as data, and the checks a reader applies to them
 * before trusting any number in them (spec/FORMAT.md, "Header", "Index").
 */
import { FormatCode, FormatError } from '../errors.js';
import { resolveBound } from '../codec/bound.js';
import type { BoundMode, Dtype } from '../types.js';

/** Free-form attributes: strings, numbers, booleans, or arrays of them. */
export type Attrs = Record<string, string | number | boolean | (string | number | boolean)[]>;

/** One field as the header describes it. */
export interface FieldHeader {
  name: string;
  dtype: Dtype;
  /** [rows, cols]. */
  shape: number[];
  /** [tileRows, tileCols]. */
  tile: number[];
  bound: {
    mode: BoundMode;
    value: number;
    /** The resolved absolute tolerance: pointwise limit (abs, rel) or RMSE limit (rmse, psnr). */
    tolerance: number;
    /** [min, max] of the valid values, or null when none. */
    range: number[] | null;
  };
  fill: number | null;
  attrs: Attrs;
}

/** The header block. */
export interface ArchiveHeader {
  format: 'rankfield';
  version: number;
  writer: string;
  attrs: Attrs;
  fields: FieldHeader[];
}

/** One field's tiles in the index, as parallel columns in row-major tile order. */
export interface FieldIndex {
  offset: number[];
  length: number[];
  crc: number[];
  method: number[];
  rank: number[];
  valid: number[];
  max_err: number[];
  rmse: number[];
  value_crc: number[];
  /** Whole-field figures achieved at encode time. */
  summary: { valid: number; max_err: number; rmse: number };
}

/** The index block. */
export interface ArchiveIndex {
  fields: FieldIndex[];
}

/** Reader limits: declared sizes beyond these are refused before anything is allocated. */
export interface Limits {
  maxHeaderBytes: number;
  maxIndexBytes: number;
  maxFields: number;
  /** Cells of one field (rows x cols). */
  maxCells: number;
  /** Cells of one tile. */
  maxTileCells: number;
  maxTiles: number;
}

/** Defaults: generous for real archives, small enough that no file can exhaust memory by declaration alone. */
export const DEFAULT_LIMITS: Limits = {
  maxHeaderBytes: 16 << 20,
  maxIndexBytes: 128 << 20,
  maxFields: 10000,
  maxCells: 2 ** 40,
  maxTileCells: 1 << 20,
  maxTiles: 1 << 22,
};

type Obj = Record<string, unknown>;

function fail(label: string, what: string): never {
  throw new FormatError(FormatCode.Malformed, `${label}: ${what}`);
}

function isObj(v: unknown): v is Obj {
  return typeof v === 'object' && v !== null && !Array.isArray(v) && !(v instanceof Uint8Array);
}

function posInt(v: unknown, label: string, what: string, max = Number.MAX_SAFE_INTEGER): number {
  if (typeof v !== 'number' || !Number.isInteger(v) || v < 1 || v > max) fail(label, `${what} must be an integer in 1..${max}, got ${String(v)}`);
  return v;
}

/** What is wrong with an attribute map, or null when it is usable. */
export function attrsProblem(v: unknown): string | null {
  if (!isObj(v)) return 'attrs must be a map';
  const ok = (x: unknown) => typeof x === 'string' || typeof x === 'number' || typeof x === 'boolean';
  for (const [k, a] of Object.entries(v)) {
    if (k === '__proto__') return "attribute name '__proto__' is not allowed";
    if (!(ok(a) || (Array.isArray(a) && a.every(ok)))) return `attribute '${k}' must be a string, number, boolean or an array of them`;
  }
  return null;
}

function checkAttrs(v: unknown, label: string): Attrs {
  if (v === undefined) return {};
  const problem = attrsProblem(v);
  if (problem) fail(label, problem);
  return v as Attrs;
}

/** Validate a decoded header. */
export function checkHeader(raw: unknown, limits: Limits, label: string): ArchiveHeader {
  if (!isObj(raw)) fail(label, 'header is not a map');
  if (raw.format !== 'rankfield') fail(label, `header format is ${JSON.stringify(raw.format)}, not "rankfield"`);
  if (raw.version !== 1) fail(label, `header version ${JSON.stringify(raw.version)} does not match the container version 1`);
  if (!Array.isArray(raw.fields)) fail(label, 'header has no fields list');
  if (raw.fields.length > limits.maxFields) throw new FormatError(FormatCode.Limit, `${label}: ${raw.fields.length} fields exceed the limit of ${limits.maxFields}`);
  const names = new Set<string>();
  const fields = raw.fields.map((f: unknown, i: number): FieldHeader => {
    const at = `${label} header field ${i}`;
    if (!isObj(f)) fail(at, 'is not a map');
    if (typeof f.name !== 'string' || f.name.length === 0 || f.name.length > 1024) fail(at, 'name must be a string of 1 to 1024 characters');
    if (names.has(f.name)) fail(at, `duplicate field name '${f.name}'`);
    names.add(f.name);
    const where = `${label} field '${f.name}'`;
    if (f.dtype !== 'f32' && f.dtype !== 'f64') fail(where, `dtype ${JSON.stringify(f.dtype)} is not f32 or f64`);
    if (!Array.isArray(f.shape) || f.shape.length !== 2) fail(where, 'shape must be [rows, cols]');
    if (!Array.isArray(f.tile) || f.tile.length !== 2) fail(where, 'tile must be [rows, cols]');
    const rows = posInt(f.shape[0], where, 'rows');
    const cols = posInt(f.shape[1], where, 'cols');
    const tr = posInt(f.tile[0], where, 'tile rows');
    const tc = posInt(f.tile[1], where, 'tile cols');
    if (rows * cols > limits.maxCells) throw new FormatError(FormatCode.Limit, `${where}: ${rows}x${cols} exceeds the limit of ${limits.maxCells} cells`);
    if (tr * tc > limits.maxTileCells) throw new FormatError(FormatCode.Limit, `${where}: tile ${tr}x${tc} exceeds the limit of ${limits.maxTileCells} cells`);
    const tiles = Math.ceil(rows / tr) * Math.ceil(cols / tc);
    if (tiles > limits.maxTiles) throw new FormatError(FormatCode.Limit, `${where}: ${tiles} tiles exceed the limit of ${limits.maxTiles}`);
    const b = f.bound;
    if (!isObj(b)) fail(where, 'bound is not a map');
    if (!['abs', 'rel', 'rmse', 'psnr'].includes(b.mode as string)) fail(where, `bound mode ${JSON.stringify(b.mode)} is unknown`);
    if (typeof b.value !== 'number' || !(b.value > 0) || !Number.isFinite(b.value)) fail(where, 'bound value must be a positive finite number');
    if (typeof b.tolerance !== 'number' || !(b.tolerance >= 0)) fail(where, 'bound tolerance must be a number >= 0');
    const range = b.range;
    if (range !== null && !(Array.isArray(range) && range.length === 2 && range.every((x) => typeof x === 'number' && Number.isFinite(x)) && range[0] <= range[1])) {
      fail(where, 'bound range must be finite [min, max] with min <= max, or nil');
    }
    let fill: number | null = null;
    if (f.fill !== null && f.fill !== undefined) {
      if (!(f.fill instanceof Uint8Array) || f.fill.length !== 8) fail(where, 'fill must be nil or 8 bytes (binary64, little-endian)');
      fill = new DataView(f.fill.buffer, f.fill.byteOffset, 8).getFloat64(0, true);
    }
    const tolerance = resolveBound({ mode: b.mode as BoundMode, value: b.value as number }, range ? (range[1] as number) - (range[0] as number) : 0);
    if (!Object.is(Math.min(Number.isFinite(tolerance) ? tolerance : Number.MAX_VALUE, Number.MAX_VALUE), b.tolerance)) {
      fail(where, `bound tolerance ${String(b.tolerance)} is not what ${String(b.mode)}:${String(b.value)} gives for the stored range`);
    }
    return {
      name: f.name,
      dtype: f.dtype,
      shape: [rows, cols],
      tile: [tr, tc],
      bound: { mode: b.mode as BoundMode, value: b.value, tolerance: b.tolerance, range: range as number[] | null },
      fill,
      attrs: checkAttrs(f.attrs, where),
    };
  });
  const writer = typeof raw.writer === 'string' ? raw.writer : 'unknown';
  return { format: 'rankfield', version: 1, writer, attrs: checkAttrs(raw.attrs, `${label} header`), fields };
}

/** Rows and columns of tile t of a field (edge tiles are partial). */
export function tileShape(h: Pick<FieldHeader, 'shape' | 'tile'>, t: number): [number, number] {
  const gc = Math.ceil(h.shape[1] / h.tile[1]);
  const ti = Math.floor(t / gc);
  const tj = t % gc;
  return [Math.min(h.tile[0], h.shape[0] - ti * h.tile[0]), Math.min(h.tile[1], h.shape[1] - tj * h.tile[1])];
}

const COLUMNS = ['offset', 'length', 'crc', 'method', 'rank', 'valid', 'max_err', 'rmse', 'value_crc'] as const;

/** Validate a decoded index against its header and the payload region [start, end). */
export function checkIndex(raw: unknown, header: ArchiveHeader, start: number, end: number, limits: Limits, label: string): ArchiveIndex {
  if (!isObj(raw) || !Array.isArray(raw.fields)) fail(label, 'index is not a map with a fields list');
  if (raw.fields.length !== header.fields.length) fail(label, `index lists ${raw.fields.length} fields, header ${header.fields.length}`);
  const fields = raw.fields.map((f: unknown, i: number): FieldIndex => {
    const h = header.fields[i];
    const where = `${label} index of field '${h.name}'`;
    if (!isObj(f)) fail(where, 'is not a map');
    const tiles = Math.ceil(h.shape[0] / h.tile[0]) * Math.ceil(h.shape[1] / h.tile[1]);
    for (const c of COLUMNS) {
      const col = f[c];
      if (!Array.isArray(col) || col.length !== tiles) fail(where, `column '${c}' must list ${tiles} tiles`);
      if (!col.every((v) => typeof v === 'number' && !Number.isNaN(v))) fail(where, `column '${c}' holds a non-number`);
    }
    const col = (c: (typeof COLUMNS)[number]) => f[c] as number[];
    for (let t = 0; t < tiles; t++) {
      const off = col('offset')[t];
      const len = col('length')[t];
      if (!Number.isInteger(off) || !Number.isInteger(len) || off < start || len < 2 || off + len > end) {
        fail(where, `tile ${t} payload ${off}+${len} lies outside the payload bytes ${start}..${end}`);
      }
      for (const c of ['crc', 'value_crc'] as const) {
        const v = col(c)[t];
        if (!Number.isInteger(v) || v < 0 || v > 0xffffffff) fail(where, `tile ${t} ${c} is not a 32-bit value`);
      }
      const [m, n] = tileShape(h, t);
      const method = col('method')[t];
      const rank = col('rank')[t];
      const valid = col('valid')[t];
      if (method !== 0 && method !== 1) fail(where, `tile ${t} method ${method} is not 0 or 1`);
      if (!Number.isInteger(rank) || rank < 0 || rank > Math.min(m, n) || (method === 0 && rank !== 0)) fail(where, `tile ${t} rank ${rank} is impossible for a ${m}x${n} tile`);
      if (!Number.isInteger(valid) || valid < 0 || valid > m * n) fail(where, `tile ${t} valid count ${valid} is impossible for a ${m}x${n} tile`);
      for (const c of ['max_err', 'rmse'] as const) {
        const v = col(c)[t];
        if (!(v >= 0) || !Number.isFinite(v)) fail(where, `tile ${t} ${c} ${v} is not a finite number >= 0`);
      }
    }
    // Payloads may not overlap: each tile owns its bytes.
    const byOffset = col('offset').map((o, t) => [o, col('length')[t]]).sort((a, b) => a[0] - b[0]);
    for (let k = 1; k < byOffset.length; k++) {
      if (byOffset[k][0] < byOffset[k - 1][0] + byOffset[k - 1][1]) fail(where, `tile payloads overlap at offset ${byOffset[k][0]}`);
    }
    const s = f.summary;
    if (!isObj(s) || !Number.isInteger(s.valid) || !((s.valid as number) >= 0)) fail(where, 'summary must hold an integer valid count');
    for (const k of ['max_err', 'rmse'] as const) {
      if (typeof s[k] !== 'number' || !((s[k] as number) >= 0) || !Number.isFinite(s[k])) fail(where, `summary ${k} must be a finite number >= 0`);
    }
    void limits;
    return { ...(Object.fromEntries(COLUMNS.map((c) => [c, col(c)])) as Omit<FieldIndex, 'summary'>), summary: { valid: s.valid as number, max_err: s.max_err as number, rmse: s.rmse as number } };
  });
  return { fields };
}
