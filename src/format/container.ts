/**
 * The container: prologue, tile payloads, header, index, tail
 * (spec/FORMAT.md). This module knows bytes, CRCs and the structure of the
 * header and index; it knows nothing of how tiles are coded.
 */
import { decode, encode } from '@msgpack/msgpack';
import { FormatCode, FormatError } from '../errors.js';
import { ByteReader, ByteWriter } from './bytes.js';
import { crc32 } from './crc32.js';
import type { ByteSource } from './source.js';
import { checkHeader, checkIndex, type ArchiveHeader, type ArchiveIndex, type Limits } from './schema.js';

/** Magic bytes that open every archive. */
export const MAGIC = Uint8Array.of(0x8a, 0x52, 0x46, 0x5a, 0x0d, 0x0a, 0x1a, 0x0a);
/** Magic bytes that close every archive. */
export const TAIL_MAGIC = Uint8Array.of(0x52, 0x46, 0x5a, 0x2d, 0x45, 0x4e, 0x44, 0x0a);
/** Format versions this reader understands. */
export const VERSIONS = [1] as const;
/** Version written by this writer. */
export const VERSION = 1;
export const PROLOGUE_SIZE = 16;
export const TAIL_SIZE = 48;

/** Receives archive bytes in order. */
export interface Sink {
  write(bytes: Uint8Array): void;
}

/** Collects bytes in memory. */
export class MemorySink implements Sink {
  private parts: Uint8Array[] = [];
  private size = 0;
  write(bytes: Uint8Array): void {
    this.parts.push(bytes.slice());
    this.size += bytes.length;
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
  constructor(private readonly sink: Sink) {
    const w = new ByteWriter(PROLOGUE_SIZE);
    w.bytes(MAGIC);
    w.u16(VERSION);
    w.u16(0); // required flags: none in version 1
    w.u32(0); // reserved
    this.put(w.finish());
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

  /** Write header, index and tail. */
  finish(header: ArchiveHeader, index: ArchiveIndex): void {
    if (this.finished) throw new Error('archive already finished');
    this.finished = true;
    const h = encode(headerForDisk(header));
    const headerOffset = this.pos;
    this.put(h);
    const ix = encode(index);
    const indexOffset = this.pos;
    this.put(ix);
    const t = new ByteWriter(TAIL_SIZE);
    t.u64(headerOffset);
    t.u32(h.length);
    t.u32(crc32(h));
    t.u64(indexOffset);
    t.u32(ix.length);
    t.u32(crc32(ix));
    t.u16(VERSION);
    t.u16(0);
    t.u32(crc32(t.view8()));
    t.bytes(TAIL_MAGIC);
    this.put(t.finish());
  }
}

/** The header as stored: fill values become 8-byte binary64 (so -0 and every bit survive MessagePack). */
function headerForDisk(header: ArchiveHeader): unknown {
  return {
    ...header,
    fields: header.fields.map((f) => {
      if (f.fill === null) return f;
      const b = new Uint8Array(8);
      new DataView(b.buffer).setFloat64(0, f.fill, true);
      return { ...f, fill: b };
    }),
  };
}

/** What {@link readContainer} returns. */
export interface Container {
  size: number;
  version: number;
  header: ArchiveHeader;
  index: ArchiveIndex;
  /** End of the payload region (start of header or index, whichever is first). */
  payloadEnd: number;
}

function same(a: Uint8Array, b: Uint8Array): boolean {
  return a.length === b.length && a.every((v, i) => v === b[i]);
}

function decodeBlock(bytes: Uint8Array, what: string, label: string): unknown {
  try {
    return decode(bytes);
  } catch (e) {
    throw new FormatError(FormatCode.Malformed, `${label}: ${what} is not valid MessagePack (${(e as Error).message})`);
  }
}

/** Read and check prologue, tail, header and index; payloads are left in the source. */
export async function readContainer(src: ByteSource, limits: Limits): Promise<Container> {
  const label = src.label;
  const size = await src.size();
  if (size < PROLOGUE_SIZE + TAIL_SIZE) {
    throw new FormatError(FormatCode.Truncated, `${label}: ${size} bytes is too short for an archive (at least ${PROLOGUE_SIZE + TAIL_SIZE})`);
  }
  const pro = new ByteReader(await src.read(0, PROLOGUE_SIZE), `${label} prologue`);
  if (!same(pro.bytesView(8), MAGIC)) throw new FormatError(FormatCode.BadMagic, `${label}: not a rankfield archive (wrong magic bytes at offset 0)`);
  const version = pro.u16();
  const flags = pro.u16();
  checkVersion(version, flags, label);
  const tail = new ByteReader(await src.read(size - TAIL_SIZE, TAIL_SIZE), `${label} tail`);
  const tailBytes = tail.bytes;
  if (!same(tailBytes.subarray(40), TAIL_MAGIC)) {
    throw new FormatError(FormatCode.Truncated, `${label}: no archive tail at the end of the file (truncated or not a rankfield archive)`);
  }
  if (crc32(tailBytes.subarray(0, 36)) !== new DataView(tailBytes.buffer, tailBytes.byteOffset + 36, 4).getUint32(0, true)) {
    throw new FormatError(FormatCode.Checksum, `${label}: tail CRC-32 mismatch at offset ${size - TAIL_SIZE}`);
  }
  const headerOffset = tail.u64('header offset');
  const headerLength = tail.u32('header length');
  const headerCrc = tail.u32('header CRC');
  const indexOffset = tail.u64('index offset');
  const indexLength = tail.u32('index length');
  const indexCrc = tail.u32('index CRC');
  const tailVersion = tail.u16('version');
  const tailFlags = tail.u16('flags');
  if (tailVersion !== version || tailFlags !== flags) {
    throw new FormatError(FormatCode.Malformed, `${label}: tail says version ${tailVersion} flags ${tailFlags}, prologue says ${version} flags ${flags}`);
  }
  const end = size - TAIL_SIZE;
  for (const [what, off, len, max] of [
    ['header', headerOffset, headerLength, limits.maxHeaderBytes],
    ['index', indexOffset, indexLength, limits.maxIndexBytes],
  ] as const) {
    if (off < PROLOGUE_SIZE || off + len > end) {
      throw new FormatError(FormatCode.Malformed, `${label}: ${what} at ${off}+${len} lies outside bytes ${PROLOGUE_SIZE}..${end}`);
    }
    if (len > max) throw new FormatError(FormatCode.Limit, `${label}: ${what} of ${len} bytes exceeds the limit of ${max}`);
  }
  if (headerOffset < indexOffset + indexLength && indexOffset < headerOffset + headerLength) {
    throw new FormatError(FormatCode.Malformed, `${label}: header (${headerOffset}+${headerLength}) and index (${indexOffset}+${indexLength}) overlap`);
  }
  const hb = await src.read(headerOffset, headerLength);
  if (crc32(hb) !== headerCrc) throw new FormatError(FormatCode.Checksum, `${label}: header CRC-32 mismatch (header at offset ${headerOffset})`);
  const header = checkHeader(decodeBlock(hb, 'header', label), limits, label);
  const ib = await src.read(indexOffset, indexLength);
  if (crc32(ib) !== indexCrc) throw new FormatError(FormatCode.Checksum, `${label}: index CRC-32 mismatch (index at offset ${indexOffset})`);
  const payloadEnd = Math.min(headerOffset, indexOffset);
  const index = checkIndex(decodeBlock(ib, 'index', label), header, PROLOGUE_SIZE, payloadEnd, limits, label);
  return { size, version, header, index, payloadEnd };
}

/** Refuse versions and required flags this reader does not know. */
export function checkVersion(version: number, flags: number, label: string): void {
  if (!(VERSIONS as readonly number[]).includes(version)) {
    throw new FormatError(FormatCode.Unsupported, `${label}: format version ${version} is not supported (this reader knows ${VERSIONS.join(', ')})`);
  }
  if (flags !== 0) {
    throw new FormatError(FormatCode.Unsupported, `${label}: required flags 0x${flags.toString(16)} are unknown to this reader (version ${version} defines none)`);
  }
}
