/**
 * Version 6 archives taken apart and put back together for the tests: the
 * layout spec/FORMAT.md documents (12-byte prologue; payloads written page
 * by page; MessagePack index pages, header and index directory; 24-byte
 * tail: u32 header length, u32 directory length, u16 version, u16 flags,
 * u32 CRC of header, directory and the tail's first 12 bytes, 8 magic
 * bytes, little-endian). The index is edited as one "logical" index
 * (per field, columns over all tiles in tile order, as version 1 stored it)
 * and split into pages again on the way back, so that an edit of tile t
 * lands in the page that holds t. The header, stored as arrays, is edited
 * as keyed maps too (keyedHeader, diskHeader). Parsing trusts its input:
 * always an archive this library wrote.
 */
import { decode, encode } from '@msgpack/msgpack';
import { crc32 } from '../../src/format/crc32.js';
import { COLUMN_TYPES, columnsBytes, kindParts, PAGE_COLUMNS, readColumns } from '../../src/format/page-columns.js';

/**
 * A decoded MessagePack block (header, index directory or page) that the
 * container tests and the fuzzer edit and reshape at will: any member may
 * become any value, so it is typed loosely on purpose, and this is the one
 * place of the test helpers that says `any`.
 */
// biome-ignore lint/suspicious/noExplicitAny: a decoded block whose shape tests change freely (comment above)
export type Block = any;

export const PROLOGUE = 12;
export const TAIL = 24;
export const COLUMNS = ['offset', 'length', 'crc', 'method', 'rank', 'valid', 'max_err', 'rmse', 'value_crc', 'prefix'] as const;

/** Where the header and the index directory are, from the lengths in the tail (they end where it begins). */
export interface Layout {
  headerOffset: number;
  headerLength: number;
  dirOffset: number;
  dirLength: number;
  tailOffset: number;
}

export function layout(b: Uint8Array): Layout {
  const d = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const t = b.length - TAIL;
  const headerLength = d.getUint32(t, true);
  const dirLength = d.getUint32(t + 4, true);
  return { headerOffset: t - dirLength - headerLength, headerLength, dirOffset: t - dirLength, dirLength, tailOffset: t };
}

/** A field's tile and page grid, as parsed from the seed archive (edits of the header do not move pages). */
export interface Grid {
  rows: number;
  cols: number;
  tileRows: number;
  tileCols: number;
  slices: number;
  page: [number, number];
  /** The field's stored tolerance (for error columns stored as shares of it). */
  tol: number;
}

/** The field tile numbers of page p, in page order (spec/FORMAT.md, section 7). */
export function pageTiles(g: Grid, p: number): number[] {
  const gr = Math.ceil(g.rows / g.tileRows);
  const gc = Math.ceil(g.cols / g.tileCols);
  const pr = Math.ceil(gr / g.page[0]);
  const pc = Math.ceil(gc / g.page[1]);
  const s = Math.floor(p / (pr * pc));
  const pi = Math.floor((p % (pr * pc)) / pc);
  const pj = p % pc;
  const out: number[] = [];
  for (let ti = pi * g.page[0]; ti < Math.min(gr, (pi + 1) * g.page[0]); ti++) for (let tj = pj * g.page[1]; tj < Math.min(gc, (pj + 1) * g.page[1]); tj++) out.push(s * gr * gc + ti * gc + tj);
  return out;
}

export function pageCount(g: Grid): number {
  const gr = Math.ceil(g.rows / g.tileRows);
  const gc = Math.ceil(g.cols / g.tileCols);
  return g.slices * Math.ceil(gr / g.page[0]) * Math.ceil(gc / g.page[1]);
}

/** An archive in parts. */
export interface Parts {
  /** Bytes 0 .. end of the payloads (prologue and payloads). */
  front: Uint8Array;
  header: Block;
  /** The directory, decoded. */
  dir: Block;
  /** The index pages, decoded, per field. */
  pages: Block[][];
  grids: Grid[];
}

/** Cells of tile t of a grid (edge tiles are partial). */
export function tileCells(g: Grid, t: number): number {
  const gr = Math.ceil(g.rows / g.tileRows);
  const gc = Math.ceil(g.cols / g.tileCols);
  const local = t % (gr * gc);
  const i0 = Math.floor(local / gc) * g.tileRows;
  const j0 = (local % gc) * g.tileCols;
  return Math.min(g.tileRows, g.rows - i0) * Math.min(g.tileCols, g.cols - j0);
}

/** The columns of an index page, in their stored order inside its first element (spec/FORMAT.md, section 7.3); then optionally `prefix`. */
export const DISK_PAGE = PAGE_COLUMNS;

/**
 * A stored index page (an array: the binary columns, then optionally `prefix`) as a map of the logical
 * columns, with each tile's offset (from the page's payload run), method and
 * rank (from `kind`) and valid count (from `missing`) worked out as a reader
 * does.
 */
export function keyedPage(raw: Block, g: Grid, p: number, dataOffset: number): Block {
  const tiles = pageTiles(g, p);
  const out: Block = {};
  const bad = (what: string): never => {
    throw new Error(`seed page ${p}: ${what}`);
  };
  Object.assign(out, readColumns(raw[0], tiles.length, g.tol, bad));
  if (raw.length > 1) out.prefix = raw[1];
  let at = dataOffset;
  out.offset = out.length.map((l: number) => ((at += l), at - l));
  out.valid = tiles.map((t, k) => tileCells(g, t) - out.missing[k]);
  out.method = out.kind.map((x: number) => kindParts(x).method);
  out.rank = out.kind.map((x: number) => kindParts(x).rank);
  delete out.missing;
  delete out.kind;
  return out;
}

/** Whether a column's values fit its stored type (spec/FORMAT.md 7.3), one per tile of the page. */
function fitsColumn(c: (typeof DISK_PAGE)[number], values: Block, tiles: number): boolean {
  const type = COLUMN_TYPES[c];
  const fits = (v: unknown) => typeof v === 'number' && (type === 'error' || (Number.isInteger(v) && v >= 0 && v < 2 ** 32));
  return Array.isArray(values) && values.length === tiles && values.every(fits);
}

/**
 * A logical page map back to its stored form: the columns of
 * {@link DISK_PAGE} in one binary value (`kind` from `method` and `rank`,
 * `missing` from `valid`, `offset` dropped: it is not stored), then
 * `prefix` if present, then any other keys' values (after an empty prefix
 * column when there is none). When a test made a column hostile (values
 * that its stored type cannot hold, a method other than 0 and 1: no kind
 * expresses it), the columns pass through as seven MessagePack arrays
 * instead, which a reader refuses.
 */
export function diskPage(pg: Block, g: Grid, p: number): Block {
  if (typeof pg !== 'object' || pg === null || Array.isArray(pg)) return pg;
  const tiles = pageTiles(g, p);
  const valid = pg.valid;
  const missing = Array.isArray(valid) ? valid.map((v: unknown, k: number) => (typeof v === 'number' && k < tiles.length ? tileCells(g, tiles[k]) - v : v)) : valid;
  const { method, rank } = pg;
  const kindOf = (k: number): unknown => (method[k] === 0 && rank[k] === 0 ? 0 : method[k] === 1 && typeof rank[k] === 'number' ? rank[k] + 1 : `method ${method[k]} rank ${rank[k]}`);
  const kind = Array.isArray(method) && Array.isArray(rank) && method.length === rank.length ? method.map((_: unknown, k: number) => kindOf(k)) : method;
  const columns: Block = Object.fromEntries(DISK_PAGE.map((c) => [c, c === 'missing' ? missing : c === 'kind' ? kind : pg[c]]));
  const stored = DISK_PAGE.every((c) => fitsColumn(c, columns[c], tiles.length)) ? columnsBytes(columns) : DISK_PAGE.map((c) => columns[c]);
  const out: Block[] = [stored];
  const known = ['length', 'crc', 'method', 'rank', 'valid', 'offset', 'prefix', 'max_err', 'rmse', 'value_crc'];
  const extra = Object.keys(pg).filter((k) => !known.includes(k));
  if ('prefix' in pg || extra.length > 0) out.push(pg.prefix ?? tiles.map(() => []));
  for (const k of extra) out.push(pg[k]);
  return out;
}

/** A logical directory entry back to its stored form `[page, page_length, page_crc, data_length, summary]` (offsets are not stored), then any other keys' values. */
export function diskDirField(f: Block): Block {
  if (typeof f !== 'object' || f === null || Array.isArray(f)) return f;
  const s = f.summary;
  const summary = typeof s === 'object' && s !== null && !Array.isArray(s) ? [s.valid, s.max_err, s.rmse] : s;
  const out: Block[] = [f.page, f.page_length, f.page_crc, f.data_length, summary];
  for (const k of Object.keys(f)) if (!['page', 'page_offset', 'page_length', 'page_crc', 'data_offset', 'data_length', 'summary'].includes(k)) out.push(f[k]);
  return out;
}

/** The stored elements of the header, of a field entry and of a bound, in their order (spec/FORMAT.md, section 6). */
export const DISK_HEADER = ['writer', 'attrs', 'fields'] as const;
export const DISK_FIELD = ['name', 'dtype', 'shape', 'tile', 'bound', 'fill', 'attrs', 'nd', 'layer'] as const;
export const DISK_BOUND = ['mode', 'value', 'tolerance', 'range'] as const;
/** The keys of a field entry's `nd` map, which the logical field holds as keys of its own (as version 2 stored them). */
export const ND_KEYS = ['slices', 'nd_shape', 'dims', 'layout'] as const;

const isMap = (v: unknown): v is Record<string, Block> => typeof v === 'object' && v !== null && Object.getPrototypeOf(v) === Object.prototype;

/**
 * The stored header (an array `[writer, attrs, fields]`, each field an array
 * `[name, dtype, shape, tile, bound, fill?, attrs?, nd?, layer?]`, each bound
 * `[mode, value, tolerance, range]`) as the keyed "logical" header the tests
 * edit: maps with those keys, the keys of a field's `nd` map among its own,
 * and a nil (or left out) fill, attrs or nd as no key at all.
 */
export function keyedHeader(raw: Block): Block {
  const out: Block = { writer: raw[0] };
  if (raw[1] !== null) out.attrs = raw[1];
  out.fields = raw[2].map((f: Block) => {
    const g: Block = {};
    DISK_FIELD.forEach((k, i) => {
      if (i < f.length && f[i] !== null) g[k] = f[i];
    });
    g.bound = Object.fromEntries(DISK_BOUND.map((k, i) => [k, f[4][i]]));
    if (g.nd) Object.assign(g, g.nd);
    delete g.nd;
    return g;
  });
  return out;
}

/**
 * The values of `keys` of map `m` in their order, then the values of its
 * other keys (a test's unknown keys: elements a reader ignores). A key left
 * out in the middle is nil; at the end it is left out too, unless other keys
 * follow.
 */
function positional(m: Record<string, Block>, keys: readonly string[], value: (k: string) => Block = (k) => m[k], skip: readonly string[] = []): Block[] {
  const out: Block[] = keys.map(value);
  const extra = Object.keys(m).filter((k) => !keys.includes(k) && !skip.includes(k));
  if (extra.length === 0) while (out.length > 0 && out[out.length - 1] === undefined) out.pop();
  return [...out.map((v) => v ?? null), ...extra.map((k) => m[k])];
}

/**
 * A logical header back to its stored form (the inverse of
 * {@link keyedHeader}): fill, attrs and nd left out at the end of a field
 * when it has none, as the writer does. Keys a test added follow the known
 * elements; values a test made hostile (a field or bound that is no map)
 * pass through.
 */
export function diskHeader(h: Block): Block {
  if (!isMap(h)) return h;
  return positional(h, DISK_HEADER, (k) => (k === 'fields' && Array.isArray(h.fields) ? h.fields.map(diskField) : h[k]));
}

function diskField(f: Block): Block {
  if (!isMap(f)) return f;
  const nd: Block = {};
  for (const k of ND_KEYS) if (k in f) nd[k] = f[k];
  const value = (k: string): Block => {
    if (k === 'bound') return isMap(f.bound) ? positional(f.bound, DISK_BOUND) : f.bound;
    if (k === 'nd') return 'nd' in f ? f.nd : Object.keys(nd).length > 0 ? nd : undefined;
    return k === 'fill' || k === 'attrs' ? (f[k] ?? undefined) : f[k];
  };
  return positional(f, DISK_FIELD, value, ND_KEYS);
}

export function split(b: Uint8Array): Parts {
  const l = layout(b);
  const header = keyedHeader(decode(b.subarray(l.headerOffset, l.headerOffset + l.headerLength)));
  const raw = decode(b.subarray(l.dirOffset, l.dirOffset + l.dirLength)) as Block[];
  let dataAt = PROLOGUE;
  for (const f of raw) for (const n of f[3]) dataAt += n;
  const payloadEnd = dataAt;
  let pageAt = payloadEnd;
  dataAt = PROLOGUE;
  const fields = raw.map((f: Block) => {
    const d: Block = { page: f[0], page_offset: [], page_length: f[1], page_crc: f[2], data_offset: [], data_length: f[3], summary: { valid: f[4][0], max_err: f[4][1], rmse: f[4][2] } };
    for (let p = 0; p < f[1].length; p++) {
      d.page_offset.push(pageAt);
      d.data_offset.push(dataAt);
      pageAt += f[1][p];
      dataAt += f[3][p];
    }
    return d;
  });
  const dir = { fields };
  const grids = header.fields.map((h: Block, i: number): Grid => ({ rows: h.shape[0], cols: h.shape[1], tileRows: h.tile[0], tileCols: h.tile[1], slices: h.slices ?? 1, page: fields[i].page, tol: h.bound.tolerance }));
  const pages = fields.map((f: Block, i: number) => f.page_offset.map((o: number, p: number) => keyedPage(decode(b.subarray(o, o + f.page_length[p])) as Block, grids[i], p, f.data_offset[p])));
  return { front: b.slice(0, payloadEnd), header, dir, pages, grids };
}

/** The logical index: per field, every column over all tiles in tile order, and the summary. */
export function joinIndex(p: Parts): Block {
  return {
    fields: p.dir.fields.map((f: Block, i: number) => {
      const out: Block = {};
      for (const c of COLUMNS) {
        if (!p.pages[i].some((pg: Block) => c in pg)) continue;
        out[c] = [];
        p.pages[i].forEach((pg: Block, k: number) => pageTiles(p.grids[i], k).forEach((t, j) => (out[c][t] = pg[c][j])));
      }
      out.summary = f.summary;
      return out;
    }),
  };
}

/** Split a logical index into pages with the grids of `p` (values a test made hostile pass through). */
export function splitIndex(index: Block, p: Parts): { pages: Block[][]; dirFields: Block[]; dirExtra: Record<string, unknown> } {
  const fields: Block[] = Array.isArray(index?.fields) ? index.fields : [];
  const dirExtra: Record<string, unknown> = {};
  if (typeof index === 'object' && index !== null) for (const [k, v] of Object.entries(index)) if (k !== 'fields') dirExtra[k] = v;
  const pages: Block[][] = [];
  const dirFields = fields.map((f: Block, i: number) => {
    const g = p.grids[Math.min(i, p.grids.length - 1)];
    const orig = p.dir.fields[Math.min(i, p.dir.fields.length - 1)];
    const d: Block = { page: g.page, data_offset: orig.data_offset.slice(), data_length: orig.data_length.slice() };
    const list: Block[] = [];
    if (typeof f !== 'object' || f === null) {
      pages.push(list);
      return f;
    }
    for (let k = 0; k < pageCount(g); k++) {
      const tiles = pageTiles(g, k);
      const pg: Block = {};
      for (const c of COLUMNS) {
        if (!(c in f)) continue;
        const col = f[c];
        pg[c] = Array.isArray(col) ? tiles.filter((t) => t < col.length).map((t) => col[t]) : col;
      }
      list.push(pg);
    }
    pages.push(list);
    for (const [k, v] of Object.entries(f)) if (!(COLUMNS as readonly string[]).includes(k)) d[k] = v;
    return d;
  });
  return { pages, dirFields, dirExtra };
}

/** Options of {@link assemble}. */
export interface Assembly {
  front: Uint8Array;
  headerBytes: Uint8Array;
  /** Encoded pages per field (each listed in the directory in this order). */
  pageBytes: Uint8Array[][];
  /** Directory field maps without the page_offset, page_length, page_crc columns (added here); non-objects pass as they are. */
  dirFields: Block[];
  dirExtra?: Record<string, unknown>;
  /** Replace the encoded directory. */
  dirBytes?: (b: Uint8Array) => Uint8Array;
  /** Page CRCs as the directory states them (default: computed). */
  pageCrc?: (field: number, page: number, crc: number) => number;
}

/** Put an archive together: front, pages, header, directory, tail, every length and CRC computed. */
export function assemble(a: Assembly, encodeValue: (v: unknown) => Uint8Array = (v) => encode(v)): Uint8Array {
  let pos = a.front.length;
  const fields = a.dirFields.map((f, i) => {
    const list = a.pageBytes[i] ?? [];
    const lens: number[] = [];
    const crcs: number[] = [];
    list.forEach((b, k) => {
      lens.push(b.length);
      crcs.push(a.pageCrc ? a.pageCrc(i, k, crc32(b)) : crc32(b));
      pos += b.length;
    });
    if (typeof f !== 'object' || f === null) return f;
    return diskDirField({ ...f, page_length: lens, page_crc: crcs });
  });
  let db = encodeValue([...fields, ...Object.values(a.dirExtra ?? {})]);
  if (a.dirBytes) db = a.dirBytes(db);
  const headerAt = pos;
  const dirAt = headerAt + a.headerBytes.length;
  const size = dirAt + db.length + TAIL;
  const out = new Uint8Array(size);
  out.set(a.front);
  let at = a.front.length;
  for (const list of a.pageBytes) for (const b of list) out.set(b, at), (at += b.length);
  out.set(a.headerBytes, headerAt);
  out.set(db, dirAt);
  const d = new DataView(out.buffer);
  const t = size - TAIL;
  const front = new DataView(a.front.buffer, a.front.byteOffset);
  d.setUint32(t, a.headerBytes.length, true);
  d.setUint32(t + 4, db.length, true);
  d.setUint16(t + 8, front.getUint16(8, true), true);
  d.setUint16(t + 10, front.getUint16(10, true), true);
  d.setUint32(t + 12, crc32(out.subarray(headerAt, t + 12)), true);
  out.set([0x52, 0x46, 0x5a, 0x2d, 0x45, 0x4e, 0x44, 0x0a], t + 16);
  return out;
}

/**
 * Rebuild an archive with the same payload region and a changed header and/or
 * index, every CRC and offset recomputed, so that only the content is wrong.
 * The index is edited whole (columns over all tiles) and split into its
 * pages again.
 */
export interface Edit {
  header?: (h: Block) => void;
  index?: (ix: Block) => void;
  payload?: (p: Uint8Array) => void;
  /** Replace the encoded header, index directory, or one page. */
  headerBytes?: (b: Uint8Array) => Uint8Array;
  indexBytes?: (b: Uint8Array) => Uint8Array;
  pageBytes?: (field: number, page: number, b: Uint8Array) => Uint8Array;
  /** Required flags to write in the prologue and tail instead of the archive's. */
  flags?: number;
}

export function rebuild(b: Uint8Array, edit: Edit): Uint8Array {
  const parts = split(b);
  const front = parts.front.slice();
  edit.payload?.(front.subarray(12));
  if (edit.flags !== undefined) new DataView(front.buffer, front.byteOffset).setUint16(10, edit.flags, true);
  const index = joinIndex(parts);
  edit.header?.(parts.header);
  edit.index?.(index);
  const header = encode(diskHeader(parts.header));
  const hb = edit.headerBytes ? edit.headerBytes(header) : header;
  const { pages, dirFields, dirExtra } = splitIndex(index, parts);
  const grid = (i: number) => parts.grids[Math.min(i, parts.grids.length - 1)];
  const pageBytes = pages.map((list, i) => list.map((pg, k) => (edit.pageBytes ? edit.pageBytes(i, k, encode(diskPage(pg, grid(i), k))) : encode(diskPage(pg, grid(i), k)))));
  return assemble({ front, headerBytes: hb, pageBytes, dirFields, dirExtra, dirBytes: edit.indexBytes });
}
