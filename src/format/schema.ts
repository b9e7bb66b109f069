/**
 * The header and index as data, and the checks a reader applies to them
 * before trusting any number in them (spec/FORMAT.md, "Header", "Index").
 */
import { FormatCode, FormatError, InputCode, InputError } from '../errors.js';
import { tileGrid, tileShape, type Grid } from '../geometry.js';
import type { BoundMode, Dtype } from '../types.js';
import { columnsBytes, kindParts, PAGE_COLUMNS, type PageColumn, readColumns, recordErrors, tileKind } from './page-columns.js';

/** Free-form attributes: strings, numbers, booleans, or arrays of them. */
export type Attrs = Record<string, string | number | boolean | (string | number | boolean)[]>;

/** One field as the header stores it (file keys); the encoder's input is codec/tiles.ts's FieldSpec (the caller's choices). */
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
  /**
   * Optional: number of R x C slices stacked in this field (default 1). The
   * values are the C-order values of an N-D variable; the tile grid is laid
   * per slice (spec/FORMAT.md, "N-D fields"). Present only when > 1.
   */
  slices?: number;
  /** Optional: the original N-D shape; its product is slices x rows x cols. */
  nd_shape?: number[];
  /** Optional: dimension names, one per entry of nd_shape. */
  dims?: string[];
  /** Optional: how nd_shape maps to slices x rows x cols: 'slices' or 'matrix:A'. */
  layout?: string;
  /**
   * Optional: the field layer (spec/FORMAT.md, "Field layer"): its rank and the
   * positions, in the header's field list, of the fields holding its left
   * factor (slices x rows rows, `rank` columns) and its right factor (cols
   * rows, `rank` columns).
   */
  layer?: FieldLayerRef;
  /** Not stored: set by the reader on a field that holds a factor of another field's layer. */
  factorOf?: { field: number; side: 'left' | 'right' };
}

/** A field entry's `layer` element: [rank, left, right]. */
export interface FieldLayerRef {
  rank: number;
  left: number;
  right: number;
}

/** Slices, rows and columns an N-D shape gives under a layout ('slices' or 'matrix:A'). */
export function layoutGrid(ndShape: readonly number[], layout: string): { slices: number; rows: number; cols: number } | string {
  const k = ndShape.length;
  const prod = (a: readonly number[]) => a.reduce((x, y) => x * y, 1);
  if (layout === 'slices') {
    if (k < 2) return `layout 'slices' needs at least 2 dimensions, nd_shape has ${k}`;
    return { slices: prod(ndShape.slice(0, k - 2)), rows: ndShape[k - 2], cols: ndShape[k - 1] };
  }
  const m = /^matrix:([0-9]{1,3})$/.exec(layout);
  if (m) {
    const a = Number(m[1]);
    if (a < 1 || a >= k) return `layout 'matrix:${a}' needs 1 <= ${a} < ${k} (the number of dimensions)`;
    return { slices: 1, rows: prod(ndShape.slice(0, a)), cols: prod(ndShape.slice(a)) };
  }
  return `layout ${describeValue(layout)} is not 'slices' or 'matrix:A'`;
}

/**
 * What is wrong with the N-D keys of a field, or null: slices a positive
 * integer; nd_shape positive integers whose product is slices x rows x cols;
 * dims strings (1 to 1024 characters) one per nd_shape entry;
 * layout consistent with nd_shape and [rows, cols].
 */
export function ndProblem(rows: number, cols: number, slices: unknown, ndShape: unknown, dims: unknown, layout: unknown): string | null {
  if (slices !== undefined && (typeof slices !== 'number' || !Number.isSafeInteger(slices) || slices < 1)) return `slices must be a positive integer, got ${describeValue(slices)}`;
  const s = (slices as number | undefined) ?? 1;
  if (ndShape === undefined) {
    return dims !== undefined || layout !== undefined ? 'dims and layout need nd_shape' : null;
  }
  if (!Array.isArray(ndShape) || ndShape.length < 2 || ndShape.length > 32 || !ndShape.every((d) => typeof d === 'number' && Number.isSafeInteger(d) && d >= 1)) {
    return `nd_shape must be 2 to 32 positive integers, got ${Array.isArray(ndShape) ? `[${ndShape.map(describeValue).join(', ')}]` : describeValue(ndShape)}`;
  }
  const nd = ndShape as number[];
  const product = nd.reduce((a, b) => a * b, 1);
  if (product !== s * rows * cols) return `nd_shape [${nd.join(', ')}] holds ${product} values, not slices x rows x cols = ${s}x${rows}x${cols}`;
  if (dims !== undefined) {
    if (!Array.isArray(dims) || dims.length !== nd.length) return `dims must list ${nd.length} names, one per nd_shape entry, got ${describeValue(dims)}`;
    if (!dims.every((d) => typeof d === 'string' && d.length >= 1 && d.length <= 1024)) return 'dims must be names of 1 to 1024 characters';
  }
  // A layout that is present must be a string: nil is not absent (spec 6.2.1).
  const lay = layout !== undefined ? layout : nd.length === 2 ? undefined : 'slices';
  if (lay === undefined) return s === 1 && nd[0] === rows && nd[1] === cols ? null : `nd_shape [${nd.join(', ')}] without a layout must equal [rows, cols]`;
  if (typeof lay !== 'string') return `layout must be a string, got ${describeValue(lay)}`;
  const g = layoutGrid(nd, lay);
  if (typeof g === 'string') return g;
  if (g.slices !== s || g.rows !== rows || g.cols !== cols) return `layout '${lay}' of nd_shape [${nd.join(', ')}] gives ${g.slices} slices of ${g.rows}x${g.cols}, the field declares ${s} of ${rows}x${cols}`;
  return null;
}

/** The header block. */
export interface ArchiveHeader {
  format: 'rankfield';
  version: number;
  writer: string;
  attrs: Attrs;
  fields: FieldHeader[];
}

/** Per-tile columns of the index, parallel arrays in tile order (spec/FORMAT.md, section 7). */
export interface TileColumns {
  offset: number[];
  length: number[];
  crc: number[];
  method: number[];
  rank: number[];
  valid: number[];
  max_err: number[];
  rmse: number[];
  value_crc: number[];
  /**
   * Optional: per tile, its progressive prefixes as four numbers each (byte
   * length, CRC-32 of those bytes, max error, RMSE of the values they decode
   * to), shortest first. Absent in archives written without them.
   */
  prefix?: number[][];
}

/** One field's tiles in the index, as parallel columns in row-major tile order. */
export interface FieldIndex extends TileColumns {
  /** Whole-field figures achieved at encode time. */
  summary: { valid: number; max_err: number; rmse: number };
}

/** The index block. */
export interface ArchiveIndex {
  fields: FieldIndex[];
}

/**
 * One field in the index directory (since version 3, offsets are worked out, not stored): the page grid, where each
 * index page is with its CRC-32, the payload bytes of each page's tiles, and
 * the whole-field figures (spec/FORMAT.md, section 7).
 */
export interface FieldDirectory {
  /** [tile rows, tile columns] of one page. */
  page: [number, number];
  /** Per page, in page order: file offset, length and CRC-32 of the page block. */
  page_offset: number[];
  page_length: number[];
  page_crc: number[];
  /** Per page: file offset and length of the payloads of its tiles, which lie back to back. */
  data_offset: number[];
  data_length: number[];
  /** Whole-field figures achieved at encode time. */
  summary: { valid: number; max_err: number; rmse: number };
}

/** The index directory: the small top level of the paged index. */
export interface ArchiveDirectory {
  fields: FieldDirectory[];
}

/** The tiles of one index page, as parallel columns in the page's tile order. */
export interface PageIndex extends TileColumns {
  /** Field tile numbers of the page's tiles, in page order (not stored: follows from the grid). */
  tiles: number[];
}

/**
 * Reader limits: declared sizes beyond these are refused (FormatError code
 * `limit`) before anything is allocated. Every limit is an option of
 * `open()`; see {@link DEFAULT_LIMITS} and spec/FORMAT.md, section 14.
 */
export interface Limits {
  /** Bytes of the header block. */
  maxHeaderBytes: number;
  /** Bytes of the index directory, and of each index page. */
  maxIndexBytes: number;
  /** Fields of one archive. */
  maxFields: number;
  /** Cells of one field (rows x cols), as declared; windows of larger fields cannot be declared either. */
  maxCells: number;
  /** Cells of one tile: bounds every buffer a tile decode allocates. */
  maxTileCells: number;
  /** Tiles of one field. */
  maxTiles: number;
  /** Rank of one tile: bounds the decode work of a tile to m*n*rank multiply-adds. */
  maxRank: number;
  /** Bytes of one MessagePack string or binary value in the header or index. */
  maxStringBytes: number;
  /** Cells one read may return at once (a whole field or a window): bounds the output buffer. */
  maxReadCells: number;
}

/** Defaults: generous for real archives, small enough that no file can exhaust memory by declaration alone. */
export const DEFAULT_LIMITS: Readonly<Limits> = Object.freeze({
  maxHeaderBytes: 16 << 20,
  maxIndexBytes: 128 << 20,
  maxFields: 10000,
  maxCells: 2 ** 40,
  maxTileCells: 1 << 20,
  maxTiles: 1 << 22,
  // 1024 = min(m, n) of the largest square tile of 2^20 cells: no archive the default limits accept needs more.
  maxRank: 1024,
  maxStringBytes: 1 << 20,
  maxReadCells: 1 << 28,
});

/** Entries of one map in the header or index (attributes included); a fixed rule, not an option. */
export const MAX_MAP_ENTRIES = 1 << 16;
/** Nesting depth of the header and index (legitimate blocks nest 5 deep); a fixed rule, not an option. */
export const MAX_DEPTH = 16;

/** Merge caller limits over the defaults, refusing values that are not positive integers. */
export function resolveLimits(given: Partial<Limits> | undefined): Limits {
  const out: Limits = { ...DEFAULT_LIMITS };
  if (given === undefined || given === null) return out;
  if (typeof given !== 'object') throw new InputError(InputCode.Option, `limits must be an object, got ${describeValue(given)}`);
  for (const [k, v] of Object.entries(given)) {
    if (v === undefined) continue;
    if (!(k in DEFAULT_LIMITS)) throw new InputError(InputCode.Option, `unknown reader limit '${k}' (known: ${Object.keys(DEFAULT_LIMITS).join(', ')})`);
    if (typeof v !== 'number' || !Number.isSafeInteger(v) || v < 1) throw new InputError(InputCode.Option, `reader limit ${k} must be a positive integer, got ${describeValue(v)}`);
    out[k as keyof Limits] = v;
  }
  return out;
}

/** Refuse a read of `cells` values at once above the limit (called before allocating the output). */
export function checkReadCells(cells: number, limits: Pick<Limits, 'maxReadCells'>, where: string): void {
  if (!(cells <= limits.maxReadCells)) {
    throw new FormatError(FormatCode.Limit, `${where}: reading ${cells} values at once exceeds the limit of ${limits.maxReadCells} (read windows, or raise limits.maxReadCells)`);
  }
}

type Obj = Record<string, unknown>;

function fail(label: string, what: string): never {
  throw new FormatError(FormatCode.Malformed, `${label}: ${what}`);
}

/** A short description of a decoded value for messages (never the whole of a long string or array). */
export function describeValue(v: unknown): string {
  if (v === undefined) return 'nothing';
  if (v === null) return 'nil';
  if (typeof v === 'string') return v.length > 40 ? `${printable(JSON.stringify(v.slice(0, 40)))}... (${v.length} characters)` : printable(JSON.stringify(v));
  if (typeof v === 'number' || typeof v === 'boolean' || typeof v === 'bigint') return String(v);
  if (v instanceof Uint8Array) return `${v.length} bytes of binary data`;
  if (Array.isArray(v)) return `an array of ${v.length}`;
  if (typeof v === 'object') return 'a map';
  return typeof v;
}

/**
 * Text from a file made safe for a one-line message: control characters
 * (C0, DEL, C1), line and paragraph separators and lone surrogates become
 * \uXXXX, so no name can break a line or send escape sequences to a terminal.
 */
export function printable(s: string): string {
  // Most text has none of those characters: a scan of the char codes finds that without the regular
  // expression (a read decodes each tile under a label passed through here).
  let k = 0;
  for (; k < s.length; k++) {
    const c = s.charCodeAt(k);
    if (c < 0x20 || (c >= 0x7f && c <= 0x9f) || c === 0x2028 || c === 0x2029 || (c >= 0xd800 && c <= 0xdfff)) break;
  }
  if (k === s.length) return s;
  return s.replace(/[\u0000-\u001f\u007f-\u009f\u2028\u2029]|[\ud800-\udbff](?![\udc00-\udfff])|(?<![\ud800-\udbff])[\udc00-\udfff]/g, (c) => `\\u${c.charCodeAt(0).toString(16).padStart(4, '0')}`);
}

/** A field name quoted for messages, shortened when long (names may have up to 1024 characters). */
export function quoteName(name: string): string {
  return `'${printable(name.length > 60 ? `${name.slice(0, 60)}...` : name)}'`;
}

function isObj(v: unknown): v is Obj {
  return typeof v === 'object' && v !== null && !Array.isArray(v) && !(v instanceof Uint8Array);
}

function posInt(v: unknown, label: string, what: string, max = Number.MAX_SAFE_INTEGER): number {
  if (typeof v !== 'number' || !Number.isInteger(v) || v < 1 || v > max) fail(label, `${what} must be an integer in 1..${max}, got ${describeValue(v)}`);
  return v;
}

/** Longest attribute name or string (UTF-8 bytes): the default reader limit on MessagePack strings. */
export const MAX_ATTR_STRING = 1 << 20;

function tooLong(x: unknown): boolean {
  // Three UTF-8 bytes per UTF-16 code unit at most; measure exactly only when that could exceed the limit.
  return typeof x === 'string' && x.length * 3 > MAX_ATTR_STRING && new TextEncoder().encode(x).length > MAX_ATTR_STRING;
}

/** A lone UTF-16 surrogate: a character that no well-formed UTF-8 can carry. */
const LONE_SURROGATE = /[\ud800-\udbff](?![\udc00-\udfff])|(?<![\ud800-\udbff])[\udc00-\udfff]/;

/**
 * Whether a value a writer is about to put in the header (a string, or an
 * array or map of them, keys included) holds a lone surrogate: the header
 * must be well-formed UTF-8 (spec/FORMAT.md, section 6), so such text would
 * not read back as it was given.
 */
export function holdsLoneSurrogate(v: unknown): boolean {
  if (typeof v === 'string') return LONE_SURROGATE.test(v);
  if (Array.isArray(v)) return v.some(holdsLoneSurrogate);
  if (isObj(v)) return Object.entries(v).some(([k, x]) => LONE_SURROGATE.test(k) || holdsLoneSurrogate(x));
  return false;
}

/** What is wrong with an attribute map, or null when it is usable. */
export function attrsProblem(v: unknown): string | null {
  if (!isObj(v)) return 'attrs must be a map';
  const ok = (x: unknown) => typeof x === 'string' || typeof x === 'number' || typeof x === 'boolean';
  for (const [k, a] of Object.entries(v)) {
    if (k === '__proto__') return "attribute name '__proto__' is not allowed";
    if (tooLong(k) || tooLong(a) || (Array.isArray(a) && a.some(tooLong))) return `attribute ${quoteName(k)} has a name or string longer than ${MAX_ATTR_STRING} bytes of UTF-8`;
    if (!(ok(a) || (Array.isArray(a) && a.every(ok)))) return `attribute ${quoteName(k)} must be a string, number, boolean or an array of them, got ${describeValue(a)}`;
  }
  return null;
}

function checkAttrs(v: unknown, label: string): Attrs {
  if (v === undefined || v === null) return {};
  const problem = attrsProblem(v);
  if (problem) fail(label, problem);
  return v as Attrs;
}

/** The fill value as stored: absent or nil, a number, or 8 bytes of binary64 (little-endian; the reference writer's form). */
function checkFill(v: unknown, where: string): number | null {
  if (v === undefined || v === null) return null;
  if (typeof v === 'number') return v;
  if (v instanceof Uint8Array && v.length === 8) return new DataView(v.buffer, v.byteOffset, 8).getFloat64(0, true);
  return fail(where, `fill must be nil, a number or 8 bytes (binary64, little-endian), got ${describeValue(v)}`);
}

/**
 * The header as stored (spec/FORMAT.md, section 6) is positional, like the
 * index: an array `[writer, attrs, fields]`, each field an array of the
 * elements of {@link FIELD_ELEMENTS} (the last four optional), its bound an
 * array of {@link BOUND_ELEMENTS}. Elements after the known ones are ignored.
 */
export const HEADER_ELEMENTS = ['writer', 'attrs', 'fields'] as const;
export const FIELD_ELEMENTS = ['name', 'dtype', 'shape', 'tile', 'bound', 'fill', 'attrs', 'nd', 'layer'] as const;
/** Elements a field entry must have: the first five (fill, attrs, nd and layer may be left out at the end). */
export const FIELD_REQUIRED = 5;
export const BOUND_ELEMENTS = ['mode', 'value', 'tolerance', 'range'] as const;
/** The keys an `nd` map may hold (spec/FORMAT.md, section 6.2.1); others are ignored. */
export const ND_KEYS = ['slices', 'nd_shape', 'dims', 'layout'] as const;

/** A description of a positional structure for messages: `[a, b, c]`. */
const listOf = (names: readonly string[]) => `[${names.join(', ')}]`;

/** Validate a decoded header (its on-disk array form, spec/FORMAT.md section 6). */
export function checkHeader(raw: unknown, limits: Limits, label: string, version = 3): ArchiveHeader {
  if (!Array.isArray(raw) || raw.length < HEADER_ELEMENTS.length) fail(label, `header is ${describeValue(raw)}, not an array of ${HEADER_ELEMENTS.length} elements ${listOf(HEADER_ELEMENTS)}`);
  // The version and the archive's identity are the prologue's and the tail's (spec 6.1): the header holds neither.
  const [rawWriter, rawAttrs, rawFields] = raw;
  if (!Array.isArray(rawFields)) fail(label, `header fields is ${describeValue(rawFields)}, not an array`);
  if (rawFields.length > limits.maxFields) throw new FormatError(FormatCode.Limit, `${label}: ${rawFields.length} fields exceed the limit of ${limits.maxFields}`);
  const names = new Set<string>();
  const fields = rawFields.map((f: unknown, i: number): FieldHeader => {
    const at = `${label} header field ${i}`;
    if (!Array.isArray(f) || f.length < FIELD_REQUIRED) fail(at, `is ${describeValue(f)}, not an array of ${FIELD_REQUIRED} to ${FIELD_ELEMENTS.length} elements ${listOf(FIELD_ELEMENTS)}`);
    const [name, dtype, shape, tile, b, fillValue, attrs, ndValue, layerValue] = f;
    if (typeof name !== 'string' || name.length === 0 || name.length > 1024) fail(at, `name must be a string of 1 to 1024 characters, got ${describeValue(name)}`);
    if (names.has(name)) fail(at, `duplicate field name ${describeValue(name)}`);
    names.add(name);
    const where = `${label} field ${quoteName(name)}`;
    if (dtype !== 'f32' && dtype !== 'f64') fail(where, `dtype ${describeValue(dtype)} is not "f32" or "f64"`);
    if (!Array.isArray(shape) || shape.length !== 2) fail(where, `shape must be [rows, cols], got ${describeValue(shape)}`);
    if (!Array.isArray(tile) || tile.length !== 2) fail(where, `tile must be [rows, cols], got ${describeValue(tile)}`);
    const rows = posInt(shape[0], where, 'rows');
    const cols = posInt(shape[1], where, 'cols');
    const tr = posInt(tile[0], where, 'tile rows');
    const tc = posInt(tile[1], where, 'tile cols');
    if (ndValue !== undefined && ndValue !== null && !isObj(ndValue)) fail(where, `nd is ${describeValue(ndValue)}, not nil or a map of ${ND_KEYS.join(', ')}`);
    const nd: Obj = isObj(ndValue) ? ndValue : {};
    const ndError = ndProblem(rows, cols, nd.slices, nd.nd_shape, nd.dims, nd.layout);
    if (ndError) fail(where, ndError);
    const slices = (nd.slices as number | undefined) ?? 1;
    if (slices * rows * cols > limits.maxCells) throw new FormatError(FormatCode.Limit, `${where}: ${slices}x${rows}x${cols} exceeds the limit of ${limits.maxCells} cells`);
    // A tile is cut at the field's edge, so only its part inside the field counts.
    const tileCells = Math.min(tr, rows) * Math.min(tc, cols);
    if (tileCells > limits.maxTileCells) throw new FormatError(FormatCode.Limit, `${where}: tile ${tr}x${tc} exceeds the limit of ${limits.maxTileCells} cells`);
    const tiles = slices * Math.ceil(rows / tr) * Math.ceil(cols / tc);
    if (tiles > limits.maxTiles) throw new FormatError(FormatCode.Limit, `${where}: ${tiles} tiles exceed the limit of ${limits.maxTiles}`);
    if (!Array.isArray(b) || b.length < BOUND_ELEMENTS.length) fail(where, `bound is ${describeValue(b)}, not an array of ${BOUND_ELEMENTS.length} elements ${listOf(BOUND_ELEMENTS)}`);
    const [mode, value, tolerance, range] = b;
    if (!['abs', 'rel', 'rmse', 'psnr'].includes(mode as string)) fail(where, `bound mode ${describeValue(mode)} is unknown`);
    if (typeof value !== 'number' || !(value > 0) || !Number.isFinite(value)) fail(where, `bound value must be a positive finite number, got ${describeValue(value)}`);
    // The stored tolerance is authoritative (spec 6.3): it is checked for type, not recomputed.
    if (typeof tolerance !== 'number' || !(tolerance >= 0) || !Number.isFinite(tolerance)) {
      fail(where, `bound tolerance must be a finite number >= 0, got ${describeValue(tolerance)}`);
    }
    if (range !== null && !(Array.isArray(range) && range.length === 2 && range.every((x) => typeof x === 'number' && Number.isFinite(x)) && range[0] <= range[1])) {
      fail(where, `bound range must be finite [min, max] with min <= max, or nil, got ${Array.isArray(range) ? `[${range.map(describeValue).join(', ')}]` : describeValue(range)}`);
    }
    const fill = checkFill(fillValue, where);
    const out: FieldHeader = {
      name,
      dtype,
      shape: [rows, cols],
      tile: [tr, tc],
      bound: { mode: mode as BoundMode, value, tolerance, range: range as number[] | null },
      fill,
      attrs: checkAttrs(attrs, where),
    };
    if (nd.slices !== undefined) out.slices = slices;
    if (nd.nd_shape !== undefined) out.nd_shape = (nd.nd_shape as number[]).slice();
    if (nd.dims !== undefined) out.dims = (nd.dims as string[]).slice();
    if (nd.layout !== undefined) out.layout = nd.layout as string;
    if (layerValue !== undefined && layerValue !== null) out.layer = checkLayerRef(layerValue, rawFields.length, i, where);
    return out;
  });
  checkLayers(fields, limits, label);
  const writer = typeof rawWriter === 'string' ? rawWriter : 'unknown';
  return { format: 'rankfield', version, writer, attrs: checkAttrs(rawAttrs, `${label} header`), fields };
}

/** A field entry's `layer` element: an array of three integers [rank, left, right] naming two other fields. */
function checkLayerRef(v: unknown, fieldCount: number, self: number, where: string): FieldLayerRef {
  if (!Array.isArray(v) || v.length !== 3 || !v.every((x) => Number.isSafeInteger(x))) {
    fail(where, `layer is ${describeValue(v)}, not nil or an array of three integers [rank, left, right]`);
  }
  const [rank, left, right] = v as number[];
  if (rank < 1) fail(where, `layer rank ${rank} is below 1`);
  for (const [what, x] of [['left', left], ['right', right]] as const) {
    if (x < 0 || x >= fieldCount) fail(where, `layer ${what} factor names field ${x}, but the header has fields 0 to ${fieldCount - 1}`);
    if (x === self) fail(where, `layer ${what} factor names the field itself`);
  }
  if (left === right) fail(where, `layer left and right factors name the same field ${left}`);
  return { rank, left, right };
}

/**
 * The checks between fields of spec/FORMAT.md "Field layer": each factor
 * field is f64, of the shape the layer needs, without fill value, N-D keys
 * or a layer of its own, and holds one factor of one layer only. Marks the
 * factor fields (`factorOf`).
 */
function checkLayers(fields: FieldHeader[], limits: Limits, label: string): void {
  fields.forEach((f, i) => {
    if (!f.layer) return;
    const where = `${label} field ${quoteName(f.name)}`;
    const { rank, left, right } = f.layer;
    const rows = (f.slices ?? 1) * f.shape[0];
    const cols = f.shape[1];
    if (rank > Math.min(rows, cols)) fail(where, `layer rank ${rank} exceeds the field's ${rows}x${cols}`);
    if (rank > limits.maxRank) throw new FormatError(FormatCode.Limit, `${where}: layer rank ${rank} exceeds the reader limit of ${limits.maxRank}`);
    for (const [side, at, want] of [['left', left, rows], ['right', right, cols]] as const) {
      const g = fields[at];
      const what = `layer ${side} factor (field ${at}, ${quoteName(g.name)})`;
      if (g.layer) fail(where, `${what} has a layer of its own`);
      if (g.factorOf) fail(where, `${what} already holds the ${g.factorOf.side} factor of field ${g.factorOf.field}`);
      if (g.dtype !== 'f64') fail(where, `${what} is ${g.dtype}, not f64`);
      if (g.shape[0] !== want || g.shape[1] !== rank) fail(where, `${what} has shape ${g.shape[0]}x${g.shape[1]}, not ${want}x${rank}`);
      if (g.fill !== null) fail(where, `${what} has a fill value`);
      if (g.slices !== undefined || g.nd_shape !== undefined || g.layout !== undefined) fail(where, `${what} has N-D keys`);
      g.factorOf = { field: i, side };
    }
  });
}

/**
 * The on-disk form of the header (spec/FORMAT.md, section 6): `[writer,
 * attrs, fields]`, attribute maps nil when empty; each field `[name, dtype,
 * shape, tile, [mode, value, tolerance, range], fill, attrs, nd]` with the
 * fill value as 8 bytes of binary64 (so -0 and every bit survive
 * MessagePack), `nd` a map of the N-D keys the field has, `layer` its
 * field layer's [rank, left, right], and the trailing nils (no fill, no
 * attributes, no N-D keys, no layer) left out.
 */
export function headerForDisk(header: Pick<ArchiveHeader, 'writer' | 'attrs' | 'fields'>): unknown[] {
  const fields = header.fields.map((f) => {
    const b = f.bound;
    let fill: Uint8Array | null = null;
    if (f.fill !== null) {
      fill = new Uint8Array(8);
      new DataView(fill.buffer).setFloat64(0, f.fill, true);
    }
    const nd: Record<string, unknown> = {};
    for (const k of ND_KEYS) if (f[k] !== undefined) nd[k] = f[k];
    const layer = f.layer ? [f.layer.rank, f.layer.left, f.layer.right] : null;
    const out: unknown[] = [f.name, f.dtype, [f.shape[0], f.shape[1]], [f.tile[0], f.tile[1]], [b.mode, b.value, b.tolerance, b.range], fill, nonEmpty(f.attrs), nonEmpty(nd), layer];
    while (out.length > FIELD_REQUIRED && out[out.length - 1] === null) out.pop();
    return out;
  });
  return [header.writer, nonEmpty(header.attrs), fields];
}

/** A map, or nil when it is empty. */
function nonEmpty<T extends object>(m: T): T | null {
  return Object.keys(m).length > 0 ? m : null;
}

/**
 * The smallest binary32 value at or above x (x finite, >= 0; x itself when
 * 0, below the smallest normal binary32 or above the largest): how the
 * writer stores recorded errors (spec/FORMAT.md 7.5, R(x)), which stay upper
 * bounds of what they measured. A page whose figures are not all binary32
 * values then stores its error columns as binary64.
 */
export function up32(x: number): number {
  // Below the smallest normal binary32 (subnormals lose relative precision) the value stays as it is, as binary64.
  if (x < 2 ** -126) return x;
  const f = Math.fround(x);
  if (f >= x) return Number.isFinite(f) ? f : x;
  const b = new Float32Array([f]);
  new Uint32Array(b.buffer)[0] += 1;
  return Number.isFinite(b[0]) ? b[0] : x;
}

/**
 * The on-disk form of an index page (spec/FORMAT.md 7.3): the columns of
 * {@link PAGE_COLUMNS} in one binary value (errors rounded up, R(x) of 7.5:
 * to shares of the field's tolerance where every tile's error is within it,
 * else to binary32), then the prefix column, a MessagePack array, if any.
 * Returns the page and the max_err figures a reader will read from it (the
 * field's summary is the largest of them).
 */
export function pageForDisk(h: Grid & { bound: { tolerance: number } }, ix: TileColumns, tiles: readonly number[]): { page: unknown[]; maxErr: number[] } {
  const tol = h.bound.tolerance;
  const maxErr = recordErrors(tiles.map((t) => ix.max_err[t]), tol, up32);
  const rmse = recordErrors(tiles.map((t) => ix.rmse[t]), tol, up32);
  const values: Record<PageColumn, number[]> = {
    length: tiles.map((t) => ix.length[t]),
    crc: tiles.map((t) => ix.crc[t]),
    kind: tiles.map((t) => tileKind(ix.method[t], ix.rank[t])),
    missing: tiles.map((t) => {
      const [m, n] = tileShape(h, t);
      return m * n - ix.valid[t];
    }),
    max_err: maxErr.values,
    rmse: rmse.values,
    value_crc: tiles.map((t) => ix.value_crc[t]),
  };
  const out: unknown[] = [columnsBytes(values, { max_err: maxErr.code, rmse: rmse.code }, tol)];
  if (ix.prefix) out.push(tiles.map((t) => ix.prefix![t].map((x, q) => (q % 4 >= 2 ? up32(x) : x))));
  return { page: out, maxErr: maxErr.values };
}

/** Index pages of one slice of a field: [page rows, page columns], for pages of `page` = [tile rows, tile cols]. */
export function pageGrid(h: Grid, page: readonly number[]): [number, number] {
  const [gr, gc] = tileGrid(h);
  return [Math.ceil(gr / page[0]), Math.ceil(gc / page[1])];
}

/** Total index pages of a field: slices x pages per slice. */
export function pageCount(h: Grid, page: readonly number[]): number {
  const [pr, pc] = pageGrid(h, page);
  return (h.slices ?? 1) * pr * pc;
}

/**
 * The field tile numbers of index page p, in page order: the page's tile
 * rows top to bottom, each left to right (pages never cross slices; edge
 * pages hold fewer tiles).
 */
export function pageTiles(h: Grid, page: readonly number[], p: number): number[] {
  const [gr, gc] = tileGrid(h);
  const [pr, pc] = pageGrid(h, page);
  const s = Math.floor(p / (pr * pc));
  const local = p - s * pr * pc;
  const pi = Math.floor(local / pc);
  const pj = local % pc;
  const out: number[] = [];
  for (let ti = pi * page[0]; ti < Math.min(gr, (pi + 1) * page[0]); ti++) {
    for (let tj = pj * page[1]; tj < Math.min(gc, (pj + 1) * page[1]); tj++) out.push(s * gr * gc + ti * gc + tj);
  }
  return out;
}

/** Which index page holds tile t, and its position k in that page. */
export function pageOf(h: Grid, page: readonly number[], t: number): { p: number; k: number } {
  const [gr, gc] = tileGrid(h);
  const [pr, pc] = pageGrid(h, page);
  const s = Math.floor(t / (gr * gc));
  const local = t - s * gr * gc;
  const ti = Math.floor(local / gc);
  const tj = local % gc;
  const pi = Math.floor(ti / page[0]);
  const pj = Math.floor(tj / page[1]);
  const width = Math.min(gc, (pj + 1) * page[1]) - pj * page[1];
  return { p: s * pr * pc + pi * pc + pj, k: (ti - pi * page[0]) * width + (tj - pj * page[1]) };
}

/** Where the index blocks are, for the checks of the directory. */
export interface BlockBounds {
  /** First byte after the prologue (12). */
  start: number;
  /** First byte of the tail. */
  end: number;
  header: { offset: number; length: number };
  directory: { offset: number; length: number };
}

/** The elements of a field's directory entry that are per-page columns, with their positions (spec/FORMAT.md, section 7.2). */
const DIRECTORY_COLUMNS = [
  [1, 'page_length'],
  [2, 'page_crc'],
  [3, 'data_length'],
] as const;

/**
 * Validate a decoded index directory against its header and the block
 * positions. On disk it is an array with one entry per field, each an
 * array `[page, page_length, page_crc, data_length, summary]`; nothing is
 * stored of where pages and payload runs are, because the layout is
 * contiguous: the payload runs of every field, in order, fill the bytes
 * from the prologue on, the index pages, in order, follow them and fill
 * the bytes up to the header exactly, and the header, the directory and
 * the tail follow one another to the end of the file. Returns the
 * directory with those offsets worked out, and the end of the payload
 * region (where the first index page begins).
 */
export function checkDirectory(raw: unknown, header: ArchiveHeader, b: BlockBounds, limits: Limits, label: string): { directory: ArchiveDirectory; payloadEnd: number } {
  if (!Array.isArray(raw)) fail(label, `index directory is ${describeValue(raw)}, not an array of fields`);
  if (raw.length !== header.fields.length) fail(label, `index directory lists ${raw.length} fields, header ${header.fields.length}`);
  const pagesEnd = b.header.offset;
  if (b.header.offset + b.header.length !== b.directory.offset || b.directory.offset + b.directory.length !== b.end) {
    fail(label, `the header (${b.header.offset}+${b.header.length}) and the index directory (${b.directory.offset}+${b.directory.length}) do not lie back to back before the tail (${b.end})`);
  }
  let dataAt = b.start;
  const parsed = raw.map((f: unknown, i: number) => {
    const h = header.fields[i];
    const where = `${label} index directory of field ${quoteName(h.name)}`;
    if (!Array.isArray(f) || f.length < 5) fail(where, `is ${describeValue(f)}, not an array of 5 elements [page, page_length, page_crc, data_length, summary]`);
    if (!Array.isArray(f[0]) || f[0].length !== 2) fail(where, `page must be [tile rows, tile cols], got ${describeValue(f[0])}`);
    const page: [number, number] = [posInt(f[0][0], where, 'page tile rows'), posInt(f[0][1], where, 'page tile cols')];
    const pages = pageCount(h, page);
    const [pageLength, pageCrc, dataLength] = DIRECTORY_COLUMNS.map(([at, c]) => {
      const col = f[at];
      if (!Array.isArray(col) || col.length !== pages) fail(where, `column '${c}' must list ${pages} pages, got ${describeValue(col)}`);
      for (let p = 0; p < pages; p++) {
        const v = col[p];
        if (typeof v !== 'number' || !Number.isSafeInteger(v) || v < 0) fail(where, `column '${c}' page ${p} holds ${describeValue(v)}, not an integer >= 0`);
      }
      return col as number[];
    });
    const dataOffset: number[] = [];
    for (let p = 0; p < pages; p++) {
      if (pageCrc[p] > 0xffffffff) fail(where, `page ${p} crc ${pageCrc[p]} is not a 32-bit value`);
      if (pageLength[p] < 1) fail(where, `page ${p} has length 0`);
      if (pageLength[p] > limits.maxIndexBytes) throw new FormatError(FormatCode.Limit, `${where}: page ${p} of ${pageLength[p]} bytes exceeds the limit of ${limits.maxIndexBytes}`);
      const n = pageTileCount(h, page, p);
      if (dataLength[p] < 2 * n) fail(where, `page ${p} payload run of ${dataLength[p]} bytes cannot hold its ${n} tiles (2 bytes at least each)`);
      if (dataAt + dataLength[p] > pagesEnd) fail(where, `page ${p} payload run ${dataAt}+${dataLength[p]} reaches past the header at ${pagesEnd} (payload runs lie back to back from byte ${b.start}, before the index pages)`);
      dataOffset.push(dataAt);
      dataAt += dataLength[p];
    }
    const s = f[4];
    if (!Array.isArray(s) || s.length < 3) fail(where, `summary is ${describeValue(s)}, not [valid, max_err, rmse]`);
    if (typeof s[0] !== 'number' || !Number.isSafeInteger(s[0]) || s[0] < 0) fail(where, `summary valid must be an integer >= 0, got ${describeValue(s[0])}`);
    for (const [k, x] of [['max_err', s[1]], ['rmse', s[2]]] as const) {
      if (typeof x !== 'number' || !(x >= 0) || !Number.isFinite(x)) fail(where, `summary ${k} must be a finite number >= 0, got ${describeValue(x)}`);
      if (s[0] === 0 && x !== 0) fail(where, `summary ${k} is ${x} but the field has no valid cell`);
    }
    return { where, page, pageLength, pageCrc, dataOffset, dataLength, summary: { valid: s[0], max_err: s[1] as number, rmse: s[2] as number } };
  });
  // The index pages follow the last payload run, in archive order, and end where the header begins.
  const payloadEnd = dataAt;
  let pageAt = payloadEnd;
  const fields = parsed.map(({ where, page, pageLength, pageCrc, dataOffset, dataLength, summary }): FieldDirectory => {
    const pageOffset: number[] = [];
    for (let p = 0; p < pageLength.length; p++) {
      if (pageAt + pageLength[p] > pagesEnd) fail(where, `page ${p} at ${pageAt}+${pageLength[p]} reaches past the header at ${pagesEnd} (index pages lie back to back from the end of the payload runs)`);
      pageOffset.push(pageAt);
      pageAt += pageLength[p];
    }
    return { page, page_offset: pageOffset, page_length: pageLength, page_crc: pageCrc, data_offset: dataOffset, data_length: dataLength, summary };
  });
  if (pageAt !== pagesEnd) fail(label, `the index pages end at ${pageAt}, the header begins at ${pagesEnd} (payload runs and index pages fill the bytes between the prologue and the header exactly)`);
  return { directory: { fields }, payloadEnd };
}

/** The on-disk form of a field's directory entry (spec/FORMAT.md, section 7.2): offsets are not stored. */
export function directoryForDisk(d: FieldDirectory): unknown[] {
  return [d.page, d.page_length, d.page_crc, d.data_length, [d.summary.valid, up32(d.summary.max_err), up32(d.summary.rmse)]];
}

/** Tiles of index page p (edge pages hold fewer). */
export function pageTileCount(h: Grid, page: readonly number[], p: number): number {
  const [gr, gc] = tileGrid(h);
  const [pr, pc] = pageGrid(h, page);
  const local = p % (pr * pc);
  const pi = Math.floor(local / pc);
  const pj = local % pc;
  return (Math.min(gr, (pi + 1) * page[0]) - pi * page[0]) * (Math.min(gc, (pj + 1) * page[1]) - pj * page[1]);
}

/**
 * Validate a decoded index page (page p of field h): an array of the binary
 * columns of {@link PAGE_COLUMNS}, each of the page's tile count, then
 * optionally the prefix column; each tile's figures possible for its
 * shape; the payload lengths filling exactly the page's payload run from
 * the directory, in page order (so no two tiles anywhere share a byte).
 * Returns the page with each tile's offset, method, rank and valid count
 * worked out.
 */
export function checkPage(raw: unknown, h: FieldHeader, d: FieldDirectory, p: number, limits: Limits, label: string): PageIndex {
  const where = `${label} index page ${p} of field ${quoteName(h.name)}`;
  if (!Array.isArray(raw) || raw.length < 1) fail(where, `is ${describeValue(raw)}, not an array holding the binary columns (${PAGE_COLUMNS.join(', ')})`);
  const tiles = pageTiles(h, d.page, p);
  const n = tiles.length;
  const { length, crc, kind, missing, max_err: maxErr, rmse, value_crc: valueCrc } = readColumns(raw[0], n, h.bound.tolerance, (what) => fail(where, what));
  const method = kind.map((x) => kindParts(x).method);
  const rank = kind.map((x) => kindParts(x).rank);
  const offset: number[] = [];
  const valid: number[] = [];
  let at = d.data_offset[p];
  for (let k = 0; k < n; k++) {
    const t = tiles[k];
    const len = length[k];
    if (len < 2) fail(where, `tile ${t} payload length ${len} is below 2`);
    offset.push(at);
    at += len;
    const [m, nn] = tileShape(h, t);
    const r = rank[k];
    if (r > Math.min(m, nn)) fail(where, `tile ${t} kind ${kind[k]} (rank ${r}) is impossible for a ${m}x${nn} tile`);
    if (r > limits.maxRank) throw new FormatError(FormatCode.Limit, `${where}: tile ${t} rank ${r} exceeds the limit of ${limits.maxRank}`);
    const miss = missing[k];
    if (miss > m * nn) fail(where, `tile ${t} missing count ${miss} is impossible for a ${m}x${nn} tile`);
    const v = m * nn - miss;
    valid.push(v);
    for (const [name, x] of [['max_err', maxErr[k]], ['rmse', rmse[k]]] as const) {
      if (!(x >= 0) || !Number.isFinite(x)) fail(where, `tile ${t} ${name} ${x} is not a finite number >= 0`);
      if (v === 0 && x !== 0) fail(where, `tile ${t} has no valid cell but a ${name} of ${x}`);
    }
  }
  if (at !== d.data_offset[p] + d.data_length[p]) fail(where, `its payloads end at ${at}, the directory's payload run at ${d.data_offset[p] + d.data_length[p]}`);
  const out: PageIndex = { tiles, offset, length, crc, method, rank, valid, max_err: maxErr, rmse, value_crc: valueCrc };
  if (raw.length > 1) out.prefix = checkPrefixes(raw[1], out, tiles, where);
  return out;
}

/**
 * Check a field's summary against all its tiles (a reader that has every
 * page of the field: whole-index loads and check).
 */
export function checkSummary(d: FieldDirectory, valid: readonly number[], maxErr: readonly number[], where: string): void {
  let validSum = 0;
  let maxErrMax = 0;
  for (let t = 0; t < valid.length; t++) {
    validSum += valid[t];
    if (maxErr[t] > maxErrMax) maxErrMax = maxErr[t];
  }
  const s = d.summary;
  if (s.valid !== validSum) fail(where, `summary valid count ${s.valid} is not the sum ${validSum} of the tiles' counts`);
  if (s.max_err !== up32(maxErrMax)) fail(where, `summary max_err ${s.max_err} is not the largest tile max_err ${maxErrMax} rounded up to binary32 (${up32(maxErrMax)})`);
}

/** Validate the optional prefix column: per tile, quads of (length, crc, max error, rmse), lengths rising and shorter than the payload. */
function checkPrefixes(raw: unknown, ix: Pick<PageIndex, 'length' | 'method'>, tiles: readonly number[], where: string): number[][] {
  const n = tiles.length;
  if (!Array.isArray(raw) || raw.length !== n) fail(where, `column 'prefix' must list ${n} tiles`);
  return raw.map((p: unknown, k: number) => {
    const t = tiles[k];
    if (!Array.isArray(p) || p.length % 4 !== 0 || p.length > 4 * 256) fail(where, `tile ${t} prefix list is not a list of (length, crc, max_err, rmse) quads`);
    if (p.length > 0 && ix.method[k] !== 1) fail(where, `tile ${t} lists prefixes but is not a low-rank tile`);
    let prev = 0;
    for (let q = 0; q < p.length; q += 4) {
      const [len, crc, max, rmse] = p.slice(q, q + 4) as unknown[];
      if (!Number.isInteger(len) || (len as number) <= prev || (len as number) >= ix.length[k]) fail(where, `tile ${t} prefix ${q / 4} length ${describeValue(len)} is not rising or not shorter than the payload`);
      if (!Number.isInteger(crc) || (crc as number) < 0 || (crc as number) > 0xffffffff) fail(where, `tile ${t} prefix ${q / 4} crc is not a 32-bit value`);
      for (const x of [max, rmse]) if (typeof x !== 'number' || !(x >= 0) || !Number.isFinite(x)) fail(where, `tile ${t} prefix ${q / 4} error ${describeValue(x)} is not a finite number >= 0`);
      prev = len as number;
    }
    return p as number[];
  });
}
