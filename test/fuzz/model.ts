/**
 * An archive taken apart for mutation: prologue words, payloads, header and
 * index as decoded values; and put back together with every offset, length
 * and CRC recomputed (or, on request, left as the mutation set them). The
 * layout is the one spec/FORMAT.md documents for version 2 (16-byte
 * prologue, payloads page by page, MessagePack header, index pages and index
 * directory, 48-byte tail). The index is held as one logical index (columns
 * over all tiles, test/format/paged.ts) and split into its pages when put
 * back, so an edit of tile t lands in the page holding t. The parsing here
 * trusts its input, which is always a seed archive written by this library.
 */
import { crc32 } from '../../src/format/crc32.js';
import { encodeValue } from './msgpack.js';
import { joinIndex, pageCount, pageTiles, split, splitIndex, type Block, type Grid } from '../format/paged.js';

export type { Block };

export const PROLOGUE = 16;
export const TAIL = 48;

/** Where the tail says the header and index directory are. */
export interface Layout {
  headerOffset: number;
  headerLength: number;
  indexOffset: number;
  indexLength: number;
}

export function layout(b: Uint8Array): Layout {
  const d = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const t = b.length - TAIL;
  return {
    headerOffset: d.getUint32(t, true) + d.getUint32(t + 4, true) * 2 ** 32,
    headerLength: d.getUint32(t + 8, true),
    indexOffset: d.getUint32(t + 16, true) + d.getUint32(t + 20, true) * 2 ** 32,
    indexLength: d.getUint32(t + 24, true),
  };
}


/** A decoded archive, as plain mutable data. */
export interface Model {
  version: number;
  flags: number;
  reserved: number;
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
  /** Write the index (pages and directory) before the header (both orders are valid). */
  indexFirst: boolean;
  /** Recompute index offsets, lengths and payload CRCs from `payloads` (off when a mutation edits them). */
  fixIndex: boolean;
  /** Recompute the header, directory and tail CRCs (off to test them). */
  fixCrcs: boolean;
  /** Tail version and flags, when a mutation makes them differ from the prologue's. */
  tailVersion?: number;
  tailFlags?: number;
  /** Extra bytes between the payloads and the first block (unreferenced). */
  gap?: Uint8Array;
}

export function parse(b: Uint8Array): Model {
  const d = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const l = layout(b);
  const parts = split(b);
  const index = joinIndex(parts);
  const payloads = index.fields.map((f: Block) => f.offset.map((o: number, t: number) => b.slice(o, o + f.length[t])));
  return {
    version: d.getUint16(8, true),
    flags: d.getUint16(10, true),
    reserved: d.getUint32(12, true),
    payloads,
    header: parts.header,
    index,
    grids: parts.grids,
    indexFirst: l.indexOffset < l.headerOffset,
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

/** The index page values a model serializes to, per field. */
export function pageValues(m: Model): Block[][] {
  return lay(cloneModel(m)).pages;
}

function serializeParts(m: Model): { out: Uint8Array; dirValue: unknown } {
  const { parts, pos, pages, dirFields, dirExtra } = lay(m);
  const hb = m.headerBytes ?? encodeValue(m.header);
  const pageBytes = pages.map((list, f) => list.map((pg, p) => m.pageBytes?.[`${f}/${p}`] ?? encodeValue(pg)));
  const pagesLength = pageBytes.reduce((n, list) => n + list.reduce((k, b) => k + b.length, 0), 0);
  // Index first: pages then directory, then header; else header, pages, directory.
  let at = m.indexFirst ? pos : pos + hb.length;
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
    const { page, ...rest } = f;
    return { page, page_offset: offs, page_length: lens, page_crc: crcs, ...rest };
  });
  const dirValue = { fields, ...dirExtra };
  const db = m.indexBytes ?? encodeValue(dirValue);
  const indexStart = m.indexFirst ? pos : pos + hb.length;
  const dirAt = indexStart + pagesLength;
  const headerAt = m.indexFirst ? dirAt + db.length : pos;
  const size = pos + hb.length + pagesLength + db.length + TAIL;
  const out = new Uint8Array(size);
  const d = new DataView(out.buffer);
  out.set([0x8a, 0x52, 0x46, 0x5a, 0x0d, 0x0a, 0x1a, 0x0a]);
  d.setUint16(8, m.version, true);
  d.setUint16(10, m.flags, true);
  d.setUint32(12, m.reserved >>> 0, true);
  let w = PROLOGUE;
  for (const p of parts) {
    out.set(p, w);
    w += p.length;
  }
  out.set(hb, headerAt);
  w = indexStart;
  for (const list of pageBytes) for (const b of list) out.set(b, w), (w += b.length);
  out.set(db, dirAt);
  const t = size - TAIL;
  d.setUint32(t, headerAt, true);
  d.setUint32(t + 4, 0, true);
  d.setUint32(t + 8, hb.length, true);
  d.setUint32(t + 12, crc32(hb), true);
  d.setUint32(t + 16, dirAt, true);
  d.setUint32(t + 20, 0, true);
  d.setUint32(t + 24, db.length, true);
  d.setUint32(t + 28, crc32(db), true);
  d.setUint16(t + 32, m.tailVersion ?? m.version, true);
  d.setUint16(t + 34, m.tailFlags ?? m.flags, true);
  d.setUint32(t + 36, crc32(out.subarray(t, t + 36)), true);
  out.set([0x52, 0x46, 0x5a, 0x2d, 0x45, 0x4e, 0x44, 0x0a], t + 40);
  if (!m.fixCrcs) {
    // Leave one CRC stale on purpose: the mutation is then caught by its checksum.
    d.setUint32(t + 12, (crc32(hb) ^ 1) >>> 0, true);
    d.setUint32(t + 36, crc32(out.subarray(t, t + 36)), true);
  }
  return { out, dirValue };
}

/** Put a model back into archive bytes. */
export function serialize(m: Model): Uint8Array {
  return serializeParts(m).out;
}

/** Recompute every CRC a byte-level mutation may have broken: tail, header, index directory (not page or payload CRCs). */
export function resealTail(b: Uint8Array): void {
  if (b.length < TAIL) return;
  const d = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const t = b.length - TAIL;
  const l = layout(b);
  for (const [off, len, at] of [
    [l.headerOffset, l.headerLength, t + 12],
    [l.indexOffset, l.indexLength, t + 28],
  ]) {
    if (off >= 0 && off + len <= t) d.setUint32(at, crc32(b.subarray(off, off + len)), true);
  }
  d.setUint32(t + 36, crc32(b.subarray(t, t + 36)), true);
}

/** A section inside a payload: where its 8-byte header starts and where its stored bytes end. */
export interface SectionRef {
  name: string;
  start: number;
  end: number;
}

/** Find the fixed part and sections of a seed payload (method 0 or 1). */
export function sections(p: Uint8Array): { fixedEnd: number; sections: SectionRef[] } {
  const d = new DataView(p.buffer, p.byteOffset, p.byteLength);
  const out: SectionRef[] = [];
  let pos = 0;
  const section = (name: string) => {
    const stored = d.getUint32(pos + 4, true);
    out.push({ name, start: pos, end: pos + 8 + stored });
    pos += 8 + stored;
  };
  if (p[0] === 0) {
    pos = 2;
    const fixedEnd = pos;
    section('values');
    return { fixedEnd, sections: out };
  }
  const flags = p[1];
  const rank = d.getUint16(2, true);
  pos = 12;
  const fixedEnd = pos;
  if (flags & 1) section('mask');
  const groups = p[pos++];
  pos += 2 * groups;
  for (let g = 0; g < groups; g++) section(`group ${g}`);
  void rank;
  if (flags & 2) section('residual');
  if (flags & 4) section('exceptions');
  return { fixedEnd, sections: out };
}
