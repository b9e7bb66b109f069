/**
 * An archive taken apart for mutation: prologue words, payloads, header and
 * index as decoded values; and put back together with every offset, length
 * and CRC recomputed (or, on request, left as the mutation set them). The
 * layout is the one spec/FORMAT.md documents for version 7 (12-byte
 * prologue, payloads page by page, MessagePack index pages, header and index
 * directory, 24-byte tail). The index is held as one logical index (columns
 * over all tiles, test/format/paged.ts) and split into its pages when put
 * back, so an edit of tile t lands in the page holding t. The parsing here
 * trusts its input, which is always a seed archive written by this library.
 */
import { crc32 } from '../../src/format/crc32.js';
import { encodeValue } from './msgpack.js';
import { diskDirField, diskHeader, diskPage, joinIndex, layout, pageCount, pageTiles, PROLOGUE, split, splitIndex, TAIL, type Block, type Grid } from '../format/paged.js';

export type { Block };

export { layout, PROLOGUE, TAIL, type Layout } from '../format/paged.js';

/** A decoded archive, as plain mutable data. */
export interface Model {
  version: number;
  flags: number;
  /** Payloads per field, in tile order. */
  payloads: Uint8Array[][];
  // Decoded MessagePack: shapes are whatever a mutation made of them.
  header: Block;
  /** The logical index: per field, columns over all tiles in tile order, and the summary. */
  index: Block;
  /** Tile and page grids of the seed's fields (they fix where pages and payloads go). */
  grids: Grid[];
  /** Raw block bytes to use instead of encoding the header / the index directory. */
  headerBytes?: Uint8Array;
  indexBytes?: Uint8Array;
  /** Raw bytes of single index pages, by `field/page`. */
  pageBytes?: Record<string, Uint8Array>;
  /** Write the header before the index pages (version 3's order, which version 4 and later readers must refuse). */
  headerFirst: boolean;
  /** Recompute index offsets, lengths and payload CRCs from `payloads` (off when a mutation edits them). */
  fixIndex: boolean;
  /** Recompute the tail's CRC of header, directory and tail (off to test it). */
  fixCrcs: boolean;
  /** Tail version and flags, when a mutation makes them differ from the prologue's. */
  tailVersion?: number;
  tailFlags?: number;
  /** Extra bytes between the payloads and the first block (unreferenced). */
  gap?: Uint8Array;
}

export function parse(b: Uint8Array): Model {
  const d = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const parts = split(b);
  const index = joinIndex(parts);
  const payloads = index.fields.map((f: Block) => f.offset.map((o: number, t: number) => b.slice(o, o + f.length[t])));
  return {
    version: d.getUint16(8, true),
    flags: d.getUint16(10, true),
    payloads,
    header: parts.header,
    index,
    grids: parts.grids,
    headerFirst: false,
    fixIndex: true,
    fixCrcs: true,
  };
}

/** A deep copy (Uint8Arrays copied, everything else structurally). */
export function clone<T>(v: T): T {
  if (v instanceof Uint8Array) return v.slice() as T;
  if (Array.isArray(v)) return v.map(clone) as T;
  if (typeof v === 'object' && v !== null) {
    const out: Record<string, unknown> = {};
    for (const [k, x] of Object.entries(v)) out[k] = clone(x);
    return out as T;
  }
  return v;
}

export function cloneModel(m: Model): Model {
  return {
    ...m,
    payloads: m.payloads.map((f) => f.map((p) => p.slice())),
    header: clone(m.header),
    index: clone(m.index),
    grids: m.grids.map((g) => ({ ...g, page: [g.page[0], g.page[1]] as [number, number] })),
    headerBytes: m.headerBytes?.slice(),
    indexBytes: m.indexBytes?.slice(),
    pageBytes: m.pageBytes ? Object.fromEntries(Object.entries(m.pageBytes).map(([k, v]) => [k, v.slice()])) : undefined,
    gap: m.gap?.slice(),
  };
}

/** The pieces of a model laid out: payload bytes, page values and the directory value (before encoding). */
function lay(m: Model): { parts: Uint8Array[]; pos: number; pages: Block[][]; dirFields: Block[]; dirExtra: Record<string, unknown> } {
  const parts: Uint8Array[] = [];
  let pos = PROLOGUE;
  const runs: { data_offset: number[]; data_length: number[] }[] = [];
  const placed: { offset: number; length: number; crc: number }[][] = [];
  m.payloads.forEach((field, f) => {
    const g = m.grids[Math.min(f, m.grids.length - 1)];
    const refs: { offset: number; length: number; crc: number }[] = [];
    const run = { data_offset: [] as number[], data_length: [] as number[] };
    for (let p = 0; p < pageCount(g); p++) {
      run.data_offset.push(pos);
      for (const t of pageTiles(g, p)) {
        const b = field[t];
        if (b === undefined) continue;
        refs[t] = { offset: pos, length: b.length, crc: crc32(b) };
        parts.push(b);
        pos += b.length;
      }
      run.data_length.push(pos - run.data_offset[p]);
    }
    placed.push(refs);
    runs.push(run);
  });
  if (m.gap) {
    parts.push(m.gap);
    pos += m.gap.length;
  }
  if (m.fixIndex) {
    const fields = m.index?.fields;
    if (Array.isArray(fields)) {
      placed.forEach((refs, i) => {
        const f = fields[i];
        if (typeof f !== 'object' || f === null || Object.getPrototypeOf(f) !== Object.prototype) return;
        f.offset = refs.map((r) => r.offset);
        f.length = refs.map((r) => r.length);
        f.crc = refs.map((r) => r.crc);
      });
    }
  }
  const shape = { grids: m.grids, dir: { fields: runs } } as Block;
  const { pages, dirFields, dirExtra } = splitIndex(m.index, shape);
  return { parts, pos, pages, dirFields, dirExtra };
}

/** The directory value a model serializes to (page offsets, lengths and CRCs filled in), for tricks on its bytes. */
export function directoryValue(m: Model): unknown {
  return serializeParts(m).dirValue;
}

/** The header value a model serializes to (its stored form, test/format/paged.ts diskHeader). */
export function headerValue(m: Model): unknown {
  return diskHeader(m.header);
}

/** The index page values a model serializes to (their stored form), per field. */
export function pageValues(m: Model): Block[][] {
  return diskPages(m, lay(cloneModel(m)).pages);
}

/** Pages in their stored form (test/format/paged.ts diskPage), with the grid of their field. */
function diskPages(m: Model, pages: Block[][]): Block[][] {
  return pages.map((list, f) => list.map((pg, p) => diskPage(pg, m.grids[Math.min(f, m.grids.length - 1)], p)));
}

function serializeParts(m: Model): { out: Uint8Array; dirValue: unknown } {
  const { parts, pos, pages, dirFields, dirExtra } = lay(m);
  const hb = m.headerBytes ?? encodeValue(headerValue(m));
  const pageBytes = diskPages(m, pages).map((list, f) => list.map((pg, p) => m.pageBytes?.[`${f}/${p}`] ?? encodeValue(pg)));
  // Pages, then header and directory; or (a mutation) the header before the pages.
  let at = m.headerFirst ? pos + hb.length : pos;
  const fields = dirFields.map((f, i) => {
    const offs: number[] = [];
    const lens: number[] = [];
    const crcs: number[] = [];
    for (const b of pageBytes[i] ?? []) {
      offs.push(at);
      lens.push(b.length);
      crcs.push(crc32(b));
      at += b.length;
    }
    if (typeof f !== 'object' || f === null) return f;
    return diskDirField({ ...f, page_offset: offs, page_length: lens, page_crc: crcs });
  });
  const dirValue = [...fields, ...Object.values(dirExtra)];
  const db = m.indexBytes ?? encodeValue(dirValue);
  const pagesAt = m.headerFirst ? pos + hb.length : pos;
  const headerAt = m.headerFirst ? pos : at;
  const dirAt = at + (m.headerFirst ? 0 : hb.length);
  const size = dirAt + db.length + TAIL;
  const out = new Uint8Array(size);
  const d = new DataView(out.buffer);
  out.set([0x8a, 0x52, 0x46, 0x5a, 0x0d, 0x0a, 0x1a, 0x0a]);
  d.setUint16(8, m.version, true);
  d.setUint16(10, m.flags, true);
  let w = PROLOGUE;
  for (const p of parts) {
    out.set(p, w);
    w += p.length;
  }
  out.set(hb, headerAt);
  w = pagesAt;
  for (const list of pageBytes) for (const b of list) out.set(b, w), (w += b.length);
  out.set(db, dirAt);
  const t = size - TAIL;
  d.setUint32(t, hb.length, true);
  d.setUint32(t + 4, db.length, true);
  d.setUint16(t + 8, m.tailVersion ?? m.version, true);
  d.setUint16(t + 10, m.tailFlags ?? m.flags, true);
  // The CRC covers the bytes where a reader looks for header and directory (the L_H + L_D bytes before the tail) and the tail's first 12.
  const crc = crc32(out.subarray(t - db.length - hb.length, t + 12));
  d.setUint32(t + 12, m.fixCrcs ? crc : (crc ^ 1) >>> 0, true);
  out.set([0x52, 0x46, 0x5a, 0x2d, 0x45, 0x4e, 0x44, 0x0a], t + 16);
  return { out, dirValue };
}

/** Put a model back into archive bytes. */
export function serialize(m: Model): Uint8Array {
  return serializeParts(m).out;
}

/** Recompute the CRC a byte-level mutation may have broken: the tail's, over header, directory and tail (not page or payload CRCs). */
export function resealTail(b: Uint8Array): void {
  if (b.length < TAIL) return;
  const d = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const t = b.length - TAIL;
  const l = layout(b);
  if (l.headerOffset >= 0) d.setUint32(t + 12, crc32(b.subarray(l.headerOffset, t + 12)), true);
}

/**
 * A part of a tile payload that holds a length-prefixed stream:
 * - 'deflate': a DEFLATE section (exact values, exceptions): varint raw
 *   length, varint stored length, stored bytes;
 * - 'coded': a coded stream (mask class map, factor group, residual) with
 *   the bytes before its varint length (mask: none, the raw NaN length
 *   varint follows the coded length; group: step codes; residual: step and
 *   u8 predictor).
 */
export interface PartRef {
  name: string;
  kind: 'deflate' | 'coded';
  /** Where the part begins (its first word). */
  start: number;
  /** The varint that counts the stream bytes (DEFLATE: the stored length). */
  lengthAt: number;
  /** First byte of the stream, and the end of the stream. */
  streamStart: number;
  end: number;
}

/** A tile payload taken apart (the layout of spec/FORMAT.md section 10, format 8, written out here from the spec, not taken from the library). */
export interface PayloadLayout {
  method: number;
  flags: number;
  rank: number;
  /** Where the rank varint begins (2) and where the centre begins (after the varint). */
  rankAt: number;
  centreAt: number;
  /** End of the fixed part (method 0: 2 bytes; method 1: after the centre in its form). */
  fixedEnd: number;
  /** The centre's form (flags bits 5-6: 0 binary32, 1 binary64, 2 integer svarint). */
  centreForm: number;
  /** Every length-prefixed part, in payload order. */
  parts: PartRef[];
  /** The raw NaN bits after a coded mask: the varint that counts them, and where they are. */
  mask?: { rawLengthAt: number; rawStart: number; rawEnd: number };
  /** The u8 group count (method 1, rank above 0; -1 when absent). */
  groupCountAt: number;
  /** Where the group list ends: the first prefix boundary (for rank 0, where the factor block would be). */
  groupsEnd: number;
  /** Factor groups: rank count and where their left step codes (one signed varint per rank) begin. */
  groups: { size: number; stepsAt: number }[];
  /** The residual byte (predictor in bits 0-2, step form in bits 4-5), then the stored step (absent in step form 0: width 0). */
  residualByteAt?: number;
  residualStepForm?: number;
  residualStepAt?: number;
  residualStepWidth?: number;
  /** The residual's predictor (0 none, 1 Lorenzo, 2 left, 3 up, 4 average, 5 median, 6 blend). */
  residualPredictor?: number;
  /** Where the walk ended: a well-formed payload ends exactly at its length. */
  end: number;
}

/** Payload flag bits (src/codec/payload.ts), restated so a change there shows up here as a failing test. */
export const PayloadFlag = { Mask: 1, Residual: 2, Exceptions: 4, FactorDelta: 16 } as const;

/** The centre's forms (flags bits 5-6) and the residual step's forms (residual byte bits 4-5), spec/FORMAT.md 10.6.1 and 10.6.5. */
export const CentreForm = { Binary32: 0, Binary64: 1, Integer: 2 } as const;
export const StepForm = { Field: 0, Binary32: 1, Binary64: 2, Integer: 3 } as const;

/** An unsigned LEB128 varint at `at` (spec/FORMAT.md section 2): its value and byte length. Throws a RangeError past the end. */
export function readVarint(p: Uint8Array, at: number): { value: number; bytes: number } {
  let value = 0;
  for (let k = 0; ; k++) {
    if (at + k >= p.length) throw new RangeError(`varint at ${at} runs past the payload's ${p.length} bytes`);
    value += (p[at + k] & 0x7f) * 2 ** (7 * k);
    if (p[at + k] < 0x80) return { value, bytes: k + 1 };
  }
}

/** The shortest LEB128 encoding of a non-negative integer. */
export function varintBytes(v: number): number[] {
  const out: number[] = [];
  while (v >= 0x80) {
    out.push((v % 0x80) | 0x80);
    v = Math.floor(v / 0x80);
  }
  out.push(v);
  return out;
}

/**
 * Walk a tile payload of method 0 or 1. Throws a RangeError if a length
 * points past the end (a payload an earlier mutation already broke);
 * seed payloads walk to exactly their end.
 */
export function walk(p: Uint8Array): PayloadLayout {
  const parts: PartRef[] = [];
  const deflate = (name: string, at: number): number => {
    const lengthAt = at + readVarint(p, at).bytes;
    const stored = readVarint(p, lengthAt);
    const streamStart = lengthAt + stored.bytes;
    const end = streamStart + stored.value;
    if (end > p.length) throw new RangeError(`${name} ends at ${end}, past the payload's ${p.length} bytes`);
    parts.push({ name, kind: 'deflate', start: at, lengthAt, streamStart, end });
    return end;
  };
  /** A coded stream whose length varint is at `lengthAt`, after `start`; the stream starts after that varint unless `streamStart` says otherwise. */
  const coded = (name: string, start: number, lengthAt: number, streamStart = lengthAt + readVarint(p, lengthAt).bytes): number => {
    const end = streamStart + readVarint(p, lengthAt).value;
    if (end > p.length) throw new RangeError(`${name} ends at ${end}, past the payload's ${p.length} bytes`);
    parts.push({ name, kind: 'coded', start, lengthAt, streamStart, end });
    return end;
  };
  const method = p[0];
  if (method === 0) {
    const end = deflate('values', 2);
    return { method, flags: p[1], rank: 0, rankAt: -1, centreAt: -1, fixedEnd: 2, centreForm: -1, parts, groupCountAt: -1, groupsEnd: -1, groups: [], end };
  }
  if (method !== 1 || p.length < 3) throw new RangeError(`not a walkable payload (method ${method}, ${p.length} bytes)`);
  const flags = p[1];
  const rankV = readVarint(p, 2);
  const rank = rankV.value;
  const centreAt = 2 + rankV.bytes;
  const centreForm = (flags >> 5) & 3;
  let at = centreAt + (centreForm === CentreForm.Binary32 ? 4 : centreForm === CentreForm.Binary64 ? 8 : readVarint(p, centreAt).bytes);
  const fixedEnd = at;
  if (at > p.length) throw new RangeError('centre cut short');
  let mask: PayloadLayout['mask'];
  if (flags & PayloadFlag.Mask) {
    // Class map length, raw NaN length (two varints), then the class map and the raw NaN bits.
    const rawLengthAt = at + readVarint(p, at).bytes;
    const raw = readVarint(p, rawLengthAt);
    const codedEnd = coded('mask', at, at, rawLengthAt + raw.bytes);
    const rawEnd = codedEnd + raw.value;
    if (rawEnd > p.length) throw new RangeError(`mask raw NaN bits end at ${rawEnd}, past the payload's ${p.length} bytes`);
    mask = { rawLengthAt, rawStart: codedEnd, rawEnd };
    at = rawEnd;
  }
  let groupCountAt = -1;
  const groups: { size: number; stepsAt: number }[] = [];
  if (rank > 0) {
    groupCountAt = at;
    if (at >= p.length) throw new RangeError('no group count');
    const count = p[at++];
    const sizes: number[] = [];
    for (let g = 0; g < count; g++) {
      const v = readVarint(p, at);
      sizes.push(v.value);
      at += v.bytes;
    }
    // The right factor's step code, once; then each group's left step codes (one signed varint per rank).
    at += readVarint(p, at).bytes;
    for (const [g, size] of sizes.entries()) {
      const stepsAt = at;
      for (let k = 0; k < size; k++) at += readVarint(p, at).bytes;
      groups.push({ size, stepsAt });
      at = coded(`group ${g}`, stepsAt, at);
    }
  }
  const groupsEnd = groups.length > 0 ? groups[0].stepsAt : at;
  let residualByteAt: number | undefined;
  let residualStepForm: number | undefined;
  let residualStepAt: number | undefined;
  let residualStepWidth: number | undefined;
  let residualPredictor: number | undefined;
  if (flags & PayloadFlag.Residual) {
    if (at >= p.length) throw new RangeError('residual byte cut short');
    residualByteAt = at;
    residualPredictor = p[at] & 7;
    residualStepForm = (p[at] >> 4) & 3;
    const f = residualStepForm;
    residualStepWidth = f === StepForm.Field ? 0 : f === StepForm.Binary32 ? 4 : f === StepForm.Binary64 ? 8 : readVarint(p, at + 1).bytes;
    if (residualStepWidth > 0) residualStepAt = at + 1;
    if (at + 1 + residualStepWidth > p.length) throw new RangeError('residual step cut short');
    at = coded('residual', at, at + 1 + residualStepWidth);
  }
  if (flags & PayloadFlag.Exceptions) at = deflate('exceptions', at);
  return { method, flags, rank, rankAt: 2, centreAt, fixedEnd, centreForm, parts, mask, groupCountAt, groupsEnd, groups, residualByteAt, residualStepForm, residualStepAt, residualStepWidth, residualPredictor, end: at };
}

/**
 * The centre of a LowRank payload set to `v`, in the form its flags give
 * (binary32 rounds `v`); an integer centre becomes the svarint of `v`
 * rounded (any length: the payload may grow or shrink), or, for a value no
 * svarint holds (NaN, an infinity, 2^31 and beyond), the centre form is
 * switched to binary32 and `v` stored so. Returns the payload (a new array
 * when its length changed).
 */
export function setCentre(p: Uint8Array, v: number): Uint8Array {
  const w = walk(p);
  if (w.centreForm === CentreForm.Integer) {
    const k = Math.round(v);
    if (Number.isFinite(k) && Math.abs(k) < 2 ** 31) return splice(p, w.centreAt, w.fixedEnd, Uint8Array.from(varintBytes(k < 0 ? -2 * k - 1 : 2 * k)));
    const out = splice(p, w.centreAt, w.fixedEnd, new Uint8Array(4));
    out[1] &= ~0x60;
    new DataView(out.buffer, out.byteOffset, out.byteLength).setFloat32(w.centreAt, v, true);
    return out;
  }
  const d = new DataView(p.buffer, p.byteOffset, p.byteLength);
  if (w.centreForm === CentreForm.Binary64) d.setFloat64(w.centreAt, v, true);
  else d.setFloat32(w.centreAt, v, true);
  return p;
}

/** The centre of a LowRank payload. */
export function getCentre(p: Uint8Array): number {
  const w = walk(p);
  const d = new DataView(p.buffer, p.byteOffset, p.byteLength);
  if (w.centreForm === CentreForm.Integer) {
    const z = readVarint(p, w.centreAt).value;
    return z % 2 === 0 ? z / 2 : -(z + 1) / 2;
  }
  return w.centreForm === CentreForm.Binary64 ? d.getFloat64(w.centreAt, true) : d.getFloat32(w.centreAt, true);
}

/**
 * The residual step of a LowRank payload set to `v`, in the form its
 * residual byte gives; an integer step becomes the varint of `v` rounded
 * (the payload may grow or shrink), or, for a value no varint holds (NaN,
 * an infinity, negative, 2^32 and beyond), the step form is switched to
 * binary32 and `v` stored so. Returns the payload (a new array when its
 * length changed).
 */
export function setResidualStep(p: Uint8Array, v: number): Uint8Array {
  const w = walk(p);
  if (w.residualStepAt === undefined || w.residualByteAt === undefined) throw new RangeError('no stored residual step');
  const end = w.residualStepAt + (w.residualStepWidth ?? 0);
  if (w.residualStepForm === StepForm.Integer) {
    const k = Math.round(v);
    if (Number.isFinite(k) && k >= 0 && k < 2 ** 32) return splice(p, w.residualStepAt, end, Uint8Array.from(varintBytes(k)));
    const out = splice(p, w.residualStepAt, end, new Uint8Array(4));
    out[w.residualByteAt] = (out[w.residualByteAt] & ~0x30) | (StepForm.Binary32 << 4);
    new DataView(out.buffer, out.byteOffset, out.byteLength).setFloat32(w.residualStepAt, v, true);
    return out;
  }
  const d = new DataView(p.buffer, p.byteOffset, p.byteLength);
  if (w.residualStepForm === StepForm.Binary64) d.setFloat64(w.residualStepAt, v, true);
  else d.setFloat32(w.residualStepAt, v, true);
  return p;
}

/** Rows and columns of tile t of a field (header map as decoded): tiles are cut at the field's edges; slices repeat the grid. */
export function tileDims(h: { shape: number[]; tile: number[] }, t: number): [number, number] {
  const gr = Math.ceil(h.shape[0] / h.tile[0]);
  const gc = Math.ceil(h.shape[1] / h.tile[1]);
  const k = t % (gr * gc);
  const ti = Math.floor(k / gc);
  const tj = k % gc;
  return [Math.min(h.tile[0], h.shape[0] - ti * h.tile[0]), Math.min(h.tile[1], h.shape[1] - tj * h.tile[1])];
}

/** Replace bytes [from, to) of a payload by `bytes`. */
export function splice(p: Uint8Array, from: number, to: number, bytes: Uint8Array): Uint8Array {
  const out = new Uint8Array(p.length - (to - from) + bytes.length);
  out.set(p.subarray(0, from));
  out.set(bytes, from);
  out.set(p.subarray(to), from + bytes.length);
  return out;
}

/** Replace the varint at `at` by the shortest varint of `v` (which may be longer or shorter). */
export function setLength(p: Uint8Array, at: number, v: number): Uint8Array {
  return splice(p, at, at + readVarint(p, at).bytes, Uint8Array.from(varintBytes(v)));
}

/** Replace the stream of a part by `stream`, with its length varint set to `declared` (default: the stream's length). */
export function replaceStream(p: Uint8Array, part: PartRef, stream: Uint8Array, declared = stream.length): Uint8Array {
  return setLength(splice(p, part.streamStart, part.end, stream), part.lengthAt, declared);
}
