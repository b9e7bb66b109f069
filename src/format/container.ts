/**
 * The container: prologue, tile payloads, header, index pages, index
 * directory, tail (spec/FORMAT.md). This module knows bytes, CRCs and the
 * structure of the header and index; it knows nothing of how tiles are coded.
 */
import { Decoder } from '@msgpack/msgpack';
import { FormatCode, FormatError, InputCode, InputError } from '../errors.js';
import { ByteReader, ByteWriter } from './bytes.js';
import { crc32 } from './crc32.js';
import { readRanges, type ByteSource, type CoalesceOptions } from '../io/source.js';
import { tileCount } from '../geometry.js';
import { checkDirectory, checkHeader, checkPage, checkSummary, directoryForDisk, headerForDisk, pageForDisk, MAX_DEPTH, MAX_MAP_ENTRIES, pageCount, pageOf, pageTiles, quoteName, resolveLimits, type ArchiveDirectory, type ArchiveHeader, type ArchiveIndex, type FieldDirectory, type FieldHeader, type FieldIndex, type Limits, type PageIndex } from './schema.js';

/** Magic bytes that open every archive. */
export const MAGIC = Uint8Array.of(0x8a, 0x52, 0x46, 0x5a, 0x0d, 0x0a, 0x1a, 0x0a);
/** Magic bytes that close every archive. */
export const TAIL_MAGIC = Uint8Array.of(0x52, 0x46, 0x5a, 0x2d, 0x45, 0x4e, 0x44, 0x0a);
/** Format versions this reader understands. */
export const VERSIONS = [8] as const;
/** Version written by this writer. */
export const VERSION = 8;
export const PROLOGUE_SIZE = 12;
/** Required flag bit 0: some field stacks more than one slice (spec/FORMAT.md, "Required flags"). */
export const FLAG_SLICES = 0x1;
/** Required flag bit 1: some field has a field layer (spec/FORMAT.md, "Required flags"). */
export const FLAG_LAYER = 0x2;
/** Required flag bit 2: some tile's residual is coded with the symbol coder (spec/FORMAT.md, "Required flags"). */
export const FLAG_SYMBOLS = 0x4;
/** Required flags this reader understands. */
export const KNOWN_FLAGS = FLAG_SLICES | FLAG_LAYER | FLAG_SYMBOLS;
export const TAIL_SIZE = 24;
/** Tile rows and columns of one index page, unless a field asks for others: 64 tiles, about 1.6 KB of index. */
export const DEFAULT_PAGE: readonly [number, number] = [8, 8];

/** Receives archive bytes in order. */
export interface Sink {
  write(bytes: Uint8Array): void;
  /**
   * Optional: overwrite bytes already written at `offset` (same length).
   * The writer uses it to set a required flag in the prologue when a field
   * that needs one arrives after the prologue was written.
   */
  patch?(offset: number, bytes: Uint8Array): void;
}

/** Collects bytes in memory. */
export class MemorySink implements Sink {
  private parts: Uint8Array[] = [];
  private size = 0;
  write(bytes: Uint8Array): void {
    this.parts.push(bytes.slice());
    this.size += bytes.length;
  }
  patch(offset: number, bytes: Uint8Array): void {
    if (offset < 0 || offset + bytes.length > this.size) throw new InputError(InputCode.Option, `patch ${offset}+${bytes.length} lies outside the ${this.size} bytes written`);
    let at = 0;
    for (const p of this.parts) {
      const lo = Math.max(offset, at);
      const hi = Math.min(offset + bytes.length, at + p.length);
      if (lo < hi) p.set(bytes.subarray(lo - offset, hi - offset), lo - at);
      at += p.length;
    }
  }
  bytes(): Uint8Array {
    const out = new Uint8Array(this.size);
    let at = 0;
    for (const p of this.parts) {
      out.set(p, at);
      at += p.length;
    }
    return out;
  }
}

/** Where a payload was written. */
export interface PayloadRef {
  offset: number;
  length: number;
  crc: number;
}

/** Writes an archive front to back: prologue, payloads as they come, then header, index and tail. */
export class ContainerWriter {
  private pos = 0;
  private finished = false;
  private written: number;
  /** Required flags of this archive (prologue and tail). */
  flags: number;
  /** `flags`: required flags known in advance (e.g. {@link FLAG_SLICES}), written into the prologue at once. */
  constructor(private readonly sink: Sink, flags = 0) {
    this.flags = flags;
    this.written = flags;
    this.put(this.prologue(flags));
  }

  private prologue(flags: number): Uint8Array {
    const w = new ByteWriter(PROLOGUE_SIZE);
    w.bytes(MAGIC);
    w.u16(VERSION);
    w.u16(flags);
    return w.finish();
  }

  /**
   * Set required flags. When the prologue was written without them, the
   * sink must support `patch`; otherwise this returns false and nothing
   * changes (declare the flags when creating the writer instead).
   */
  requireFlags(bits: number): boolean {
    const want = this.flags | bits;
    if (want === this.flags) return true;
    if (want !== this.written) {
      if (!this.sink.patch) return false;
      this.sink.patch(0, this.prologue(want));
      this.written = want;
    }
    this.flags = want;
    return true;
  }

  private put(bytes: Uint8Array): void {
    this.sink.write(bytes);
    this.pos += bytes.length;
  }

  /** Append one tile payload. */
  addPayload(payload: Uint8Array): PayloadRef {
    const ref = { offset: this.pos, length: payload.length, crc: crc32(payload) };
    this.put(payload);
    return ref;
  }

  /**
   * Write the header, the index pages of every field, the index directory
   * and the tail. `pages[i]` is the page shape ([tile rows, tile cols]) of
   * field i; its payloads must have been added page by page, in page order
   * (each page's tiles in its own order, see pageTiles), so that each
   * page's payloads lie back to back.
   */
  finish(header: ArchiveHeader, index: ArchiveIndex, pages: readonly (readonly number[])[]): void {
    // Internal assertion: ArchiveBuilder.finish() refuses a second call first, so no input reaches this.
    if (this.finished) throw new Error('archive already finished');
    this.finished = true;
    const fields = index.fields.map((ix, i) => {
      const fh = header.fields[i];
      const page: [number, number] = [pages[i][0], pages[i][1]];
      const d: FieldDirectory = { page, page_offset: [], page_length: [], page_crc: [], data_offset: [], data_length: [], summary: { ...ix.summary, max_err: 0 } };
      if (ix.offset.length !== tileCount(fh)) throw new Error(`field ${i} has ${ix.offset.length} tiles in its index, its header ${tileCount(fh)}`);
      for (let p = 0; p < pageCount(fh, page); p++) {
        const tiles = pageTiles(fh, page, p);
        let at = ix.offset[tiles[0]];
        d.data_offset.push(at);
        for (const t of tiles) {
          if (ix.offset[t] !== at) throw new Error(`field ${i} tile ${t}: payloads were not added page by page (page ${p})`);
          at += ix.length[t];
        }
        d.data_length.push(at - ix.offset[tiles[0]]);
        const { page: onDisk, maxErr } = pageForDisk(fh, ix, tiles);
        // The summary's max_err is the largest figure the pages record, rounded up to binary32 (spec/FORMAT.md 7.4).
        for (const x of maxErr) if (x > d.summary.max_err) d.summary.max_err = x;
        const b = encodeCompact(onDisk);
        d.page_offset.push(this.pos);
        d.page_length.push(b.length);
        d.page_crc.push(crc32(b));
        this.put(b);
      }
      return directoryForDisk(d);
    });
    const h = encodeCompact(headerForDisk(header));
    this.put(h);
    const dir = encodeCompact(fields);
    this.put(dir);
    const t = new ByteWriter(TAIL_SIZE);
    t.u32(h.length);
    t.u32(dir.length);
    t.u16(VERSION);
    t.u16(this.flags);
    t.u32(crc32(t.view8(), crc32(dir, crc32(h))));
    t.bytes(TAIL_MAGIC);
    this.put(t.finish());
  }
}

const utf8 = new TextEncoder();

/**
 * MessagePack of the header and of an index page, with every number in its
 * shortest exact form: integers (other than -0) below 2^53 in magnitude as
 * the smallest integer type, other numbers as binary32 when that holds them
 * exactly (-0, infinities and NaN included), else binary64. (The general
 * encoder writes every non-integer as binary64.) Strings are UTF-8 (a lone
 * surrogate becomes U+FFFD, so the bytes are always well-formed); maps are
 * plain objects, binary data Uint8Arrays; null and undefined are nil.
 */
export function encodeCompact(value: unknown): Uint8Array {
  const w = new ByteWriter(1024);
  const be = (bytes: number, v: number, float: boolean) => {
    const b = new DataView(new ArrayBuffer(bytes));
    if (float) bytes === 4 ? b.setFloat32(0, v) : b.setFloat64(0, v);
    else if (bytes === 1) b.setUint8(0, v & 0xff);
    else if (bytes === 2) b.setUint16(0, v & 0xffff);
    else if (bytes === 4) b.setUint32(0, v >>> 0);
    else b.setBigUint64(0, BigInt.asUintN(64, BigInt(v)));
    w.bytes(new Uint8Array(b.buffer));
  };
  /** A length in the head byte below `small`, else after one of the three head bytes `codes` (8-, 16-, 32-bit length; 8-bit only where `codes[0]` is not 0). */
  const head = (n: number, fix: number, small: number, codes: readonly [number, number, number]) => {
    if (n < small) w.u8(fix | n);
    else if (n < 0x100 && codes[0] !== 0) (w.u8(codes[0]), be(1, n, false));
    else if (n < 0x10000) (w.u8(codes[1]), be(2, n, false));
    else (w.u8(codes[2]), be(4, n, false));
  };
  const put = (v: unknown): void => {
    if (v === null || v === undefined) w.u8(0xc0);
    else if (typeof v === 'boolean') w.u8(v ? 0xc3 : 0xc2);
    else if (typeof v === 'string') {
      const b = utf8.encode(v);
      head(b.length, 0xa0, 32, [0xd9, 0xda, 0xdb]);
      w.bytes(b);
    } else if (v instanceof Uint8Array) {
      head(v.length, 0, 0, [0xc4, 0xc5, 0xc6]);
      w.bytes(v);
    } else if (Array.isArray(v)) {
      head(v.length, 0x90, 16, [0, 0xdc, 0xdd]);
      for (const x of v) put(x);
    } else if (typeof v === 'number' && Number.isSafeInteger(v) && !Object.is(v, -0)) {
      if (v >= 0) {
        if (v < 0x80) w.u8(v);
        else if (v < 0x100) (w.u8(0xcc), be(1, v, false));
        else if (v < 0x10000) (w.u8(0xcd), be(2, v, false));
        else if (v < 2 ** 32) (w.u8(0xce), be(4, v, false));
        else (w.u8(0xcf), be(8, v, false));
      } else if (v >= -32) w.u8(v & 0xff);
      else if (v >= -0x80) (w.u8(0xd0), be(1, v, false));
      else if (v >= -0x8000) (w.u8(0xd1), be(2, v, false));
      else if (v >= -(2 ** 31)) (w.u8(0xd2), be(4, v, false));
      else (w.u8(0xd3), be(8, v, false));
    } else if (typeof v === 'number') {
      if (Math.fround(v) === v || Number.isNaN(v)) (w.u8(0xca), be(4, v, true));
      else (w.u8(0xcb), be(8, v, true));
    } else if (typeof v === 'object') {
      const entries = Object.entries(v);
      head(entries.length, 0x80, 16, [0, 0xde, 0xdf]);
      for (const [k, x] of entries) put(k), put(x);
    } else {
      // Internal assertion: the header and index pages hold no other kind of value.
      throw new Error(`a header or index page cannot hold ${typeof v}`);
    }
  };
  put(value);
  return w.finish();
}

/** The in-memory columns of an index page, as {@link joinPages} gathers them. */
const MEMORY_COLUMNS = ['offset', 'length', 'crc', 'method', 'rank', 'valid', 'max_err', 'rmse', 'value_crc'] as const;

/** What {@link readContainer} returns. */
export interface Container {
  size: number;
  version: number;
  header: ArchiveHeader;
  /** The index directory: per field, its pages and payload runs, and its summary. */
  directory: ArchiveDirectory;
  /** End of the payload region (start of the first of header, index pages and directory). */
  payloadEnd: number;
  /** The limits the container was checked against (defaults merged with the caller's). */
  limits: Limits;
  /** The required flags (prologue and tail agree). */
  flags: number;
}

function same(a: Uint8Array, b: Uint8Array): boolean {
  return a.length === b.length && a.every((v, i) => v === b[i]);
}

const keyText = new TextDecoder();

/**
 * Walk one MessagePack value without building it, before the decoder sees
 * it: every declared length must fit in the bytes that remain (so a
 * 5-byte array header cannot make a decoder allocate 4 Gi slots), within
 * the limits (binary values within `maxBin`, by default `maxStringBytes`);
 * maps have string keys, none twice and none `__proto__`;
 * extension types and the never-used byte 0xC1 are refused; nesting is at
 * most {@link MAX_DEPTH}; no byte may follow the value. Returns the number
 * of map entries, which the decoded value must reproduce (a second guard
 * against duplicate keys). Iterative: no input can exhaust the call stack.
 */
export function scanMessagePack(b: Uint8Array, what: string, label: string, limits: Pick<Limits, 'maxStringBytes' | 'maxTiles' | 'maxFields'>, maxBin = limits.maxStringBytes): number {
  const bad = (at: number, problem: string): never => {
    throw new FormatError(FormatCode.Malformed, `${label}: ${what} is not valid MessagePack: ${problem} at block offset ${at}`);
  };
  const view = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const maxArray = Math.max(limits.maxTiles, limits.maxFields);
  // Per open container: items still to come, and for maps the keys seen and whether a key comes next.
  const left: number[] = [];
  const keys: (Set<string> | null)[] = [];
  const keyNext: boolean[] = [];
  let entries = 0;
  let pos = 0;
  const len = b.length;
  const need = (at: number, n: number, of: string): void => {
    if (n > len - pos) bad(at, `${of} needs ${n} bytes but only ${len - pos} remain`);
  };
  const uint = (at: number, size: number): number => {
    need(at, size, 'a length');
    const v = size === 1 ? b[pos] : size === 2 ? view.getUint16(pos) : view.getUint32(pos);
    pos += size;
    return v;
  };
  do {
    const depth = left.length;
    const at = pos;
    if (pos >= len) bad(at, 'the block ends inside a value');
    const h = b[pos++];
    if (depth > 0 && keys[depth - 1] !== null && keyNext[depth - 1]) {
      // A map key: a string, read and remembered.
      let n: number;
      if (h >= 0xa0 && h <= 0xbf) n = h - 0xa0;
      else if (h === 0xd9) n = uint(at, 1);
      else if (h === 0xda) n = uint(at, 2);
      else if (h === 0xdb) n = uint(at, 4);
      else return bad(at, `a map key of type byte 0x${h.toString(16)} (keys must be strings)`);
      if (n > limits.maxStringBytes) throw new FormatError(FormatCode.Limit, `${label}: ${what} key of ${n} bytes at block offset ${at} exceeds the limit of ${limits.maxStringBytes}`);
      need(at, n, 'a key');
      const key = keyText.decode(b.subarray(pos, pos + n));
      pos += n;
      if (key === '__proto__') bad(at, 'the key __proto__');
      const seen = keys[depth - 1] as Set<string>;
      if (seen.has(key)) bad(at, `the key ${JSON.stringify(key.slice(0, 40))} a second time in one map`);
      seen.add(key);
      keyNext[depth - 1] = false;
      continue;
    }
    let str = -1;
    let open = -1;
    let isMap = false;
    if (h <= 0x7f || h >= 0xe0 || h === 0xc0 || h === 0xc2 || h === 0xc3) {
      // fixint, nil, false, true: the head byte is the value
    } else if (h <= 0x8f) (open = h - 0x80), (isMap = true);
    else if (h <= 0x9f) open = h - 0x90;
    else if (h <= 0xbf) str = h - 0xa0;
    else if (h === 0xcc || h === 0xd0) need(at, 1, 'a number'), (pos += 1);
    else if (h === 0xcd || h === 0xd1) need(at, 2, 'a number'), (pos += 2);
    else if (h === 0xca || h === 0xce || h === 0xd2) need(at, 4, 'a number'), (pos += 4);
    else if (h === 0xcb || h === 0xcf || h === 0xd3) need(at, 8, 'a number'), (pos += 8);
    else if (h === 0xd9 || h === 0xc4) str = uint(at, 1);
    else if (h === 0xda || h === 0xc5) str = uint(at, 2);
    else if (h === 0xdb || h === 0xc6) str = uint(at, 4);
    else if (h === 0xdc) open = uint(at, 2);
    else if (h === 0xdd) open = uint(at, 4);
    else if (h === 0xde) (open = uint(at, 2)), (isMap = true);
    else if (h === 0xdf) (open = uint(at, 4)), (isMap = true);
    else if (h === 0xc1) bad(at, 'the unused type byte 0xc1');
    else bad(at, `an extension type (byte 0x${h.toString(16)}), which this format does not use`);
    if (str >= 0) {
      if (str > (h >= 0xc4 && h <= 0xc6 ? maxBin : limits.maxStringBytes)) throw new FormatError(FormatCode.Limit, `${label}: ${what} string or binary of ${str} bytes at block offset ${at} exceeds the limit of ${limits.maxStringBytes}`);
      need(at, str, 'a string or binary value');
      pos += str;
    }
    if (open > 0) {
      if (depth + 1 > MAX_DEPTH) bad(at, `nesting deeper than ${MAX_DEPTH}`);
      if (isMap && open > MAX_MAP_ENTRIES) throw new FormatError(FormatCode.Limit, `${label}: ${what} map of ${open} entries at block offset ${at} exceeds the limit of ${MAX_MAP_ENTRIES}`);
      if (!isMap && open > maxArray) throw new FormatError(FormatCode.Limit, `${label}: ${what} array of ${open} elements at block offset ${at} exceeds the limit of ${maxArray}`);
      // Every element takes at least one byte (a map entry two).
      need(at, isMap ? 2 * open : open, `${isMap ? 'a map' : 'an array'} of ${open}`);
      left.push(open);
      keys.push(isMap ? new Set() : null);
      keyNext.push(isMap);
      if (isMap) entries += open;
      continue;
    }
    // A value is complete: count it against its container, closing every container it completes.
    for (let d = left.length - 1; d >= 0; d--) {
      left[d]--;
      if (keys[d] !== null) keyNext[d] = true;
      if (left[d] > 0) break;
      left.pop();
      keys.pop();
      keyNext.pop();
    }
  } while (left.length > 0);
  if (pos !== len) bad(pos, `${len - pos} bytes after the end of the value`);
  return entries;
}

/** Map entries of a decoded value (maps are plain objects; depth is bounded by the scan). */
function countEntries(v: unknown): number {
  let s = 0;
  if (Array.isArray(v)) {
    for (let i = 0; i < v.length; i++) if (typeof v[i] === 'object' && v[i] !== null) s += countEntries(v[i]);
  } else if (typeof v === 'object' && v !== null && !(v instanceof Uint8Array)) {
    for (const x of Object.values(v)) s += 1 + (typeof x === 'object' && x !== null ? countEntries(x) : 0);
  }
  return s;
}

/** Scan, then decode one block with the decoder's own limits set from ours. */
function decodeBlock(bytes: Uint8Array, what: string, label: string, limits: Limits, maxBin = limits.maxStringBytes): unknown {
  const entries = scanMessagePack(bytes, what, label, limits, maxBin);
  const maxLength = Math.max(limits.maxTiles, limits.maxFields);
  const decoder = new Decoder({
    maxStrLength: limits.maxStringBytes,
    maxBinLength: maxBin,
    maxArrayLength: maxLength,
    maxMapLength: MAX_MAP_ENTRIES,
    maxExtLength: 0,
  });
  let value: unknown;
  try {
    value = decoder.decode(bytes);
  } catch (e) {
    throw new FormatError(FormatCode.Malformed, `${label}: ${what} is not valid MessagePack (${(e as Error).message})`);
  }
  // Two keys that decode to the same property name (the scan compares them as UTF-8 text).
  if (countEntries(value) !== entries) throw new FormatError(FormatCode.Malformed, `${label}: ${what} has a map with a key twice`);
  return value;
}

/** Read and check prologue, tail, header and index; payloads are left in the source. */
export async function readContainer(src: ByteSource, given?: Partial<Limits>): Promise<Container> {
  const limits = resolveLimits(given);
  const label = src.label;
  const size = await src.size();
  if (!Number.isSafeInteger(size) || size < PROLOGUE_SIZE + TAIL_SIZE) {
    throw new FormatError(FormatCode.Truncated, `${label}: ${size} bytes is too short for an archive (at least ${PROLOGUE_SIZE + TAIL_SIZE})`);
  }
  const pro = new ByteReader(await src.read(0, PROLOGUE_SIZE), `${label} prologue`, 0, 'file offset');
  if (!same(pro.bytesView(8), MAGIC)) throw new FormatError(FormatCode.BadMagic, `${label}: not a rankfield archive (wrong magic bytes at offset 0)`);
  const version = pro.u16();
  const flags = pro.u16();
  checkVersion(version, flags, label);
  const tail = new ByteReader(await src.read(size - TAIL_SIZE, TAIL_SIZE), `${label} tail`, size - TAIL_SIZE, 'file offset');
  const tailBytes = tail.bytes;
  if (!same(tailBytes.subarray(16), TAIL_MAGIC)) {
    throw new FormatError(FormatCode.Truncated, `${label}: no archive tail at the end of the file (truncated or not a rankfield archive: bytes ${size - 8}..${size} are not the tail magic)`);
  }
  const headerLength = tail.u32('header length');
  const dirLength = tail.u32('index directory length');
  const tailVersion = tail.u16('version');
  const tailFlags = tail.u16('flags');
  const blockCrc = tail.u32('CRC');
  if (tailVersion !== version || tailFlags !== flags) {
    throw new FormatError(FormatCode.Malformed, `${label}: tail says version ${tailVersion} flags ${tailFlags}, prologue says ${version} flags ${flags}`);
  }
  const end = size - TAIL_SIZE;
  if (headerLength > limits.maxHeaderBytes) throw new FormatError(FormatCode.Limit, `${label}: header of ${headerLength} bytes exceeds the limit of ${limits.maxHeaderBytes}`);
  if (dirLength > limits.maxIndexBytes) throw new FormatError(FormatCode.Limit, `${label}: index directory of ${dirLength} bytes exceeds the limit of ${limits.maxIndexBytes}`);
  if (PROLOGUE_SIZE + headerLength + dirLength > end) {
    throw new FormatError(FormatCode.Malformed, `${label}: a header of ${headerLength} bytes and an index directory of ${dirLength} bytes do not fit between the prologue and the tail (${end - PROLOGUE_SIZE} bytes)`);
  }
  // The header and the directory lie back to back just before the tail: one read, one CRC (with the tail's first 12 bytes).
  const dirOffset = end - dirLength;
  const headerOffset = dirOffset - headerLength;
  const block = await src.read(headerOffset, headerLength + dirLength);
  if (crc32(tailBytes.subarray(0, 12), crc32(block)) !== blockCrc) {
    throw new FormatError(FormatCode.Checksum, `${label}: CRC-32 mismatch over the header, index directory and tail (bytes ${headerOffset}..${size - 12}): one of them is damaged`);
  }
  const hb = block.subarray(0, headerLength);
  const header = checkHeader(decodeBlock(hb, `header (at offset ${headerOffset})`, label, limits), limits, label, version);
  const sliced = header.fields.find((f) => (f.slices ?? 1) > 1);
  if (sliced && (flags & FLAG_SLICES) === 0) {
    throw new FormatError(FormatCode.Malformed, `${label}: field ${quoteName(sliced.name)} holds ${sliced.slices} slices but required flag bit 0 (slices) is not set`);
  }
  const layered = header.fields.find((f) => f.layer !== undefined);
  if (layered && (flags & FLAG_LAYER) === 0) {
    throw new FormatError(FormatCode.Malformed, `${label}: field ${quoteName(layered.name)} has a field layer but required flag bit 1 (layer) is not set`);
  }
  const db = block.subarray(headerLength);
  const bounds = { start: PROLOGUE_SIZE, end, header: { offset: headerOffset, length: headerLength }, directory: { offset: dirOffset, length: dirLength } };
  const { directory, payloadEnd } = checkDirectory(decodeBlock(db, `index directory (at offset ${dirOffset})`, label, limits), header, bounds, limits, label);
  return { size, version, header, directory, payloadEnd, limits, flags };
}

/**
 * Fetch, check and decode index pages `pages` of field `f` (merged reads, as
 * for payloads). Each page's CRC-32 is checked against the directory before
 * its bytes are decoded; a failure names the page and field.
 */
export async function readPages(src: ByteSource, c: Container, f: number, pages: readonly number[], options: CoalesceOptions = {}): Promise<PageIndex[]> {
  const d = c.directory.fields[f];
  const h = c.header.fields[f];
  const ranges = pages.map((p) => {
    if (!Number.isInteger(p) || p < 0 || p >= d.page_offset.length) throw new RangeError(`field ${f} has pages 0..${d.page_offset.length - 1}, not ${p}`);
    return { offset: d.page_offset[p], length: d.page_length[p] };
  });
  const blocks = await readRanges(src, ranges, options);
  return pages.map((p, i) => decodePage(blocks[i], c, f, p, src.label, h, d));
}

/** Check one fetched index page against the directory and decode it. */
export function decodePage(bytes: Uint8Array, c: Container, f: number, p: number, label: string, h: FieldHeader = c.header.fields[f], d: FieldDirectory = c.directory.fields[f]): PageIndex {
  const what = `index page ${p} of field ${quoteName(h.name)} (at offset ${d.page_offset[p]})`;
  if (crc32(bytes) !== d.page_crc[p]) throw new FormatError(FormatCode.Checksum, `${label}: ${what}: CRC-32 mismatch`);
  // A page's binary columns grow with its tiles: they are bounded by the page's length (within maxIndexBytes), not maxStringBytes.
  return checkPage(decodeBlock(bytes, what, label, c.limits, c.limits.maxIndexBytes), h, d, p, c.limits, label);
}

/**
 * The whole index of field f from all its pages (in page order), in tile
 * order, with the field summary checked against the tiles.
 */
export function joinPages(c: Container, f: number, pages: readonly PageIndex[], label: string): FieldIndex {
  const h = c.header.fields[f];
  const d = c.directory.fields[f];
  const n = tileCount(h);
  const cols = { offset: new Array<number>(n), length: new Array<number>(n), crc: new Array<number>(n), method: new Array<number>(n), rank: new Array<number>(n), valid: new Array<number>(n), max_err: new Array<number>(n), rmse: new Array<number>(n), value_crc: new Array<number>(n) };
  const prefix: number[][] | undefined = pages.some((pg) => pg.prefix) ? new Array<number[]>(n) : undefined;
  for (const pg of pages) {
    pg.tiles.forEach((t, k) => {
      for (const c2 of MEMORY_COLUMNS) cols[c2][t] = pg[c2][k];
      if (prefix) prefix[t] = pg.prefix?.[k] ?? [];
    });
  }
  checkSummary(d, cols.valid, cols.max_err, `${label} index of field ${quoteName(h.name)}`);
  const out: FieldIndex = { ...cols, summary: d.summary };
  if (prefix) out.prefix = prefix;
  return out;
}

/** Where tile t of field f is described: its index page and position there. */
export function tilePage(c: Container, f: number, t: number): { p: number; k: number } {
  return pageOf(c.header.fields[f], c.directory.fields[f].page, t);
}

/** Refuse versions and required flags this reader does not know. */
export function checkVersion(version: number, flags: number, label: string): void {
  if (!(VERSIONS as readonly number[]).includes(version)) {
    throw new FormatError(FormatCode.Unsupported, `${label}: format version ${version} is not supported (this reader knows ${VERSIONS.join(', ')})`);
  }
  if ((flags & ~KNOWN_FLAGS) !== 0) {
    throw new FormatError(FormatCode.Unsupported, `${label}: required flags 0x${(flags & ~KNOWN_FLAGS).toString(16)} are unknown to this reader (it knows 0x${KNOWN_FLAGS.toString(16)}: bit 0, slices; bit 1, layer; bit 2, symbols)`);
  }
}
