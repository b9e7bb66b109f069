/**
 * An archive taken apart for mutation: prologue words, payloads, header and
 * index as decoded values; and put back together with every offset, length
 * and CRC recomputed (or, on request, left as the mutation set them). The
 * layout is the one spec/FORMAT.md documents (16-byte prologue, payloads,
 * MessagePack header and index, 48-byte tail); the parsing here trusts its
 * input, which is always a seed archive written by this library.
 */
import { decode } from '@msgpack/msgpack';
import { crc32 } from '../../src/format/crc32.js';
import { encodeValue } from './msgpack.js';

export const PROLOGUE = 16;
export const TAIL = 48;

/** Where the tail says the header and index are. */
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

/**
 * A decoded MessagePack block (header or index) that mutations reshape at
 * will: any member may become any value, so it is typed loosely on purpose,
 * and this is the one place of the fuzz harness that says `any`.
 */
// biome-ignore lint/suspicious/noExplicitAny: a decoded block whose shape mutations change freely (comment above)
export type Block = any;

/** A decoded archive, as plain mutable data. */
export interface Model {
  version: number;
  flags: number;
  reserved: number;
  /** Payloads per field, in tile order. */
  payloads: Uint8Array[][];
  // Decoded MessagePack: shapes are whatever a mutation made of them.
  header: Block;
  index: Block;
  /** Raw block bytes to use instead of encoding `header` / `index`. */
  headerBytes?: Uint8Array;
  indexBytes?: Uint8Array;
  /** Write the index before the header (both orders are valid). */
  indexFirst: boolean;
  /** Recompute index offsets, lengths and payload CRCs from `payloads` (off when a mutation edits them). */
  fixIndex: boolean;
  /** Recompute the header, index and tail CRCs (off to test them). */
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
  const header = decode(b.subarray(l.headerOffset, l.headerOffset + l.headerLength)) as Block;
  const index = decode(b.subarray(l.indexOffset, l.indexOffset + l.indexLength)) as Block;
  const payloads = index.fields.map((f: Block) => f.offset.map((o: number, t: number) => b.slice(o, o + f.length[t])));
  return {
    version: d.getUint16(8, true),
    flags: d.getUint16(10, true),
    reserved: d.getUint32(12, true),
    payloads,
    header,
    index,
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
    headerBytes: m.headerBytes?.slice(),
    indexBytes: m.indexBytes?.slice(),
    gap: m.gap?.slice(),
  };
}

/** Put a model back into archive bytes. */
export function serialize(m: Model): Uint8Array {
  const parts: Uint8Array[] = [];
  let pos = PROLOGUE;
  const placed: { offset: number; length: number; crc: number }[][] = [];
  for (const field of m.payloads) {
    const refs: { offset: number; length: number; crc: number }[] = [];
    for (const p of field) {
      refs.push({ offset: pos, length: p.length, crc: crc32(p) });
      parts.push(p);
      pos += p.length;
    }
    placed.push(refs);
  }
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
  const hb = m.headerBytes ?? encodeValue(m.header);
  const ib = m.indexBytes ?? encodeValue(m.index);
  const first = m.indexFirst ? ib : hb;
  const second = m.indexFirst ? hb : ib;
  const firstAt = pos;
  const secondAt = pos + first.length;
  const headerAt = m.indexFirst ? secondAt : firstAt;
  const indexAt = m.indexFirst ? firstAt : secondAt;
  const size = secondAt + second.length + TAIL;
  const out = new Uint8Array(size);
  const d = new DataView(out.buffer);
  out.set([0x8a, 0x52, 0x46, 0x5a, 0x0d, 0x0a, 0x1a, 0x0a]);
  d.setUint16(8, m.version, true);
  d.setUint16(10, m.flags, true);
  d.setUint32(12, m.reserved >>> 0, true);
  let at = PROLOGUE;
  for (const p of parts) {
    out.set(p, at);
    at += p.length;
  }
  out.set(first, firstAt);
  out.set(second, secondAt);
  const t = size - TAIL;
  d.setUint32(t, headerAt, true);
  d.setUint32(t + 4, 0, true);
  d.setUint32(t + 8, hb.length, true);
  d.setUint32(t + 12, crc32(hb), true);
  d.setUint32(t + 16, indexAt, true);
  d.setUint32(t + 20, 0, true);
  d.setUint32(t + 24, ib.length, true);
  d.setUint32(t + 28, crc32(ib), true);
  d.setUint16(t + 32, m.tailVersion ?? m.version, true);
  d.setUint16(t + 34, m.tailFlags ?? m.flags, true);
  d.setUint32(t + 36, crc32(out.subarray(t, t + 36)), true);
  out.set([0x52, 0x46, 0x5a, 0x2d, 0x45, 0x4e, 0x44, 0x0a], t + 40);
  if (!m.fixCrcs) {
    // Leave one CRC stale on purpose: the mutation is then caught by its checksum.
    d.setUint32(t + 12, (crc32(hb) ^ 1) >>> 0, true);
    d.setUint32(t + 36, crc32(out.subarray(t, t + 36)), true);
  }
  return out;
}

/** Recompute every CRC a byte-level mutation may have broken: tail, header, index (not payload CRCs). */
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
