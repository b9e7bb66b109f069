/**
 * The strict DEFLATE decoder of src/codec/inflate.ts, against two outside
 * references and hand-built streams.
 *
 * References: node:zlib (zlib, the reference implementation of RFC 1951) and
 * fflate (the library the writer uses): every stream either makes, at every
 * level and zlib strategy, must inflate to the original bytes.
 *
 * RFC 1951 facts used (from memory): bits are packed least significant bit
 * first, Huffman codes most significant bit first; BFINAL (1 bit) then BTYPE
 * (2 bits: 0 stored, 1 fixed, 2 dynamic, 3 reserved); a stored block is
 * byte-aligned LEN, NLEN = ~LEN (u16 little-endian each), then LEN bytes.
 * Fixed codes (3.2.6): literals 0-143 are 8-bit codes from 0x30, 144-255 are
 * 9-bit codes from 0x190, symbols 256-279 7-bit codes from 0, 280-287 8-bit
 * codes from 0xC0; distance codes are 5 bits. Symbol 257 is a match of
 * length 3, distance code 0 a distance of 1. A dynamic block (3.2.7) stores
 * HLIT - 257 (5 bits), HDIST - 1 (5 bits), HCLEN - 4 (4 bits), then 3-bit
 * code length code lengths in the order 16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11,
 * 4, 12, 3, 13, 2, 14, 1, 15; code length symbol 16 repeats the previous
 * length 3-6 times (2 extra bits), 18 writes 11-138 zeros (7 extra bits).
 */
import * as zlib from 'node:zlib';
import { deflateSync } from 'fflate';
import { describe, expect, it } from 'vitest';
import { InflateError, inflateInto } from '../../src/codec/inflate.js';
import { MAX_INFLATE_RATIO, readSection } from '../../src/codec/section.js';
import { FormatCode, FormatError } from '../../src/errors.js';
import { ByteReader, ByteWriter } from '../../src/format/bytes.js';

/** Writes bits least significant first; Huffman codes most significant first. */
class Bits {
  private out: number[] = [];
  private acc = 0;
  private n = 0;
  put(v: number, len: number): this {
    for (let i = 0; i < len; i++) {
      this.acc |= ((v >> i) & 1) << this.n;
      if (++this.n === 8) this.flush();
    }
    return this;
  }
  /** Code length code lengths, 3 bits each. */
  putAll(lengths: number[]): this {
    for (const l of lengths) this.put(l, 3);
    return this;
  }
  code(c: number, len: number): this {
    for (let i = len - 1; i >= 0; i--) this.put((c >> i) & 1, 1);
    return this;
  }
  private flush(): void {
    this.out.push(this.acc);
    this.acc = 0;
    this.n = 0;
  }
  bytes(): Uint8Array {
    if (this.n > 0) this.flush();
    return Uint8Array.from(this.out);
  }
}

/** Fixed-code literal (RFC 1951 3.2.6). */
function literal(b: Bits, v: number): Bits {
  return v < 144 ? b.code(0x30 + v, 8) : b.code(0x190 + v - 144, 9);
}

function inflate(stream: Uint8Array, size: number): Uint8Array {
  const out = new Uint8Array(size);
  inflateInto(stream, out);
  return out;
}

function refusal(stream: Uint8Array, size: number): InflateError {
  try {
    inflateInto(stream, new Uint8Array(size));
  } catch (e) {
    expect(e).toBeInstanceOf(InflateError);
    return e as InflateError;
  }
  throw new Error('the stream was accepted');
}

/** Deterministic test data of several kinds (LCG from Numerical Recipes, from memory). */
function data(kind: number, length: number, seed: number): Uint8Array {
  let s = seed >>> 0;
  const rnd = () => ((s = (Math.imul(s, 1664525) + 1013904223) >>> 0) / 2 ** 32);
  const out = new Uint8Array(length);
  for (let i = 0; i < length; i++) {
    out[i] = kind === 0 ? rnd() * 256 : kind === 1 ? (rnd() < 0.9 ? 0 : rnd() * 256) : kind === 2 ? (i % 17) * 3 : kind === 3 ? Math.floor(Math.sin(i / 40) * 6) & 0xff : rnd() < 0.5 ? 65 : 66;
  }
  return out;
}

describe('inflateInto against zlib and fflate', () => {
  it('inflates every stream zlib makes (levels 0-9, all five strategies, small windows) and fflate makes (levels 0-9)', () => {
    const strategies = [zlib.constants.Z_DEFAULT_STRATEGY, zlib.constants.Z_FILTERED, zlib.constants.Z_HUFFMAN_ONLY, zlib.constants.Z_RLE, zlib.constants.Z_FIXED];
    const firstBlockTypes = new Set<number>();
    for (let k = 0; k < 60; k++) {
      const raw = data(k % 5, [0, 1, 2, 100, 1000, 30000, 70000][k % 7], k);
      const made = [
        zlib.deflateRawSync(raw, { level: k % 10, strategy: strategies[k % 5] }),
        zlib.deflateRawSync(raw, { windowBits: 9 + (k % 7), memLevel: 1 + (k % 9) }),
        deflateSync(raw, { level: (k % 10) as 0 }),
      ];
      for (const s of made) {
        expect(Buffer.from(inflate(new Uint8Array(s), raw.length)).equals(Buffer.from(raw))).toBe(true);
        firstBlockTypes.add((s[0] >> 1) & 3); // BTYPE: bits 1-2 of the first byte (RFC 1951 3.2.3)
      }
    }
    // The streams above exercise all three block types (stored, fixed, dynamic), not only one.
    expect([...firstBlockTypes].sort()).toEqual([0, 1, 2]);
  });

  it('every strict prefix of a zlib stream is refused', () => {
    const raw = data(3, 3000, 9);
    const s = new Uint8Array(zlib.deflateRawSync(raw));
    for (let n = 0; n < s.length; n++) {
      const e = refusal(s.subarray(0, n), raw.length);
      expect(['invalid', 'short']).toContain(e.kind);
    }
  });
});

describe('hand-built streams (RFC 1951)', () => {
  it('a stored block', () => {
    const body = new TextEncoder().encode('stored');
    const s = Uint8Array.of(0x01, 6, 0, 0xf9, 0xff, ...body);
    expect(new TextDecoder().decode(inflate(s, 6))).toBe('stored');
  });

  it('a fixed block: literal a, a match of length 3 at distance 1 (overlapping its own output), end of block', () => {
    const b = new Bits().put(1, 1).put(1, 2);
    literal(b, 0x61);
    b.code(1, 7).code(0, 5).code(0, 7); // symbol 257 (length 3), distance code 0, symbol 256
    expect(new TextDecoder().decode(inflate(b.bytes(), 4))).toBe('aaaa');
  });

  it('refuses bytes after the final block, naming how many', () => {
    const s = new Uint8Array(zlib.deflateRawSync(data(0, 500, 1)));
    for (const extra of [[0], [0, 0, 0], [0x03, 0x00]]) {
      const e = refusal(Uint8Array.of(...s, ...extra), 500);
      expect(e.kind).toBe('trailing');
      expect(e.message).toMatch(new RegExp(`^${extra.length} bytes after the end`));
    }
  });

  it('stops before the first match or literal that does not fit, and reports fewer bytes than the buffer holds', () => {
    const raw = data(1, 5000, 2);
    const s = new Uint8Array(zlib.deflateRawSync(raw));
    expect(refusal(s, 4999).kind).toBe('overflow');
    const short = refusal(s, 5001);
    expect(short.kind).toBe('short');
    expect(short.produced).toBe(5000);
    // A million zeros into ten bytes: refused at the eleventh.
    const bomb = new Uint8Array(zlib.deflateRawSync(new Uint8Array(1 << 20), { level: 9 }));
    const e = refusal(bomb, 10);
    expect(e.kind).toBe('overflow');
    expect(e.produced).toBeLessThanOrEqual(10);
  });

  it('refuses the reserved block type, a stored length without its complement, and reserved symbols', () => {
    expect(refusal(Uint8Array.of(0x07), 0).message).toMatch(/reserved block type/);
    expect(refusal(Uint8Array.of(0x01, 6, 0, 0xf9, 0xfe, 1, 2, 3, 4, 5, 6), 6).message).toMatch(/complement/);
    // Fixed codes 286 and 287 (8-bit codes 0xC6, 0xC7) and distance codes 30, 31 exist but may not be used.
    expect(refusal(new Bits().put(1, 1).put(1, 2).code(0xc6, 8).bytes(), 10).message).toMatch(/reserved length symbol 286/);
    const d = new Bits().put(1, 1).put(1, 2);
    literal(d, 1).code(1, 7).code(30, 5);
    expect(refusal(d.bytes(), 10).message).toMatch(/reserved distance symbol 30/);
  });

  it('refuses a distance reaching before the start of the output', () => {
    const b = new Bits().put(1, 1).put(1, 2).code(1, 7).code(0, 5).code(0, 7); // a match before any literal
    expect(refusal(b.bytes(), 3).message).toMatch(/distance of 1 reaches before the start/);
  });

  /** A dynamic block header with HLIT, HDIST and the code length code lengths given in storage order. */
  function dynamic(hlit: number, hdist: number, clens: number[]): Bits {
    return new Bits()
      .put(1, 1)
      .put(2, 2)
      .put(hlit - 257, 5)
      .put(hdist - 1, 5)
      .put(clens.length - 4, 4)
      .putAll(clens);
  }

  it('refuses over-subscribed and incomplete code length codes', () => {
    // Storage order 16, 17, 18, 0: three codes of length 1 are over-subscribed; one alone is incomplete.
    expect(refusal(dynamic(257, 1, [1, 1, 1, 0]).bytes(), 1).message).toMatch(/over-subscribed/);
    expect(refusal(dynamic(257, 1, [0, 0, 1, 0]).bytes(), 1).message).toMatch(/incomplete/);
  });

  it('refuses too many length codes, a repeat with nothing before it, and a block code without end-of-block', () => {
    expect(refusal(dynamic(287, 1, [0, 0, 1, 1]).bytes(), 1).message).toMatch(/287 literal\/length/);
    // Code length code: symbols 16 and 8 (storage order 16, 17, 18, 0, 8), each of length 1: 8 is '0', 16 is '1'.
    expect(refusal(dynamic(257, 1, [1, 0, 0, 0, 1]).code(1, 1).put(0, 2).bytes(), 1).message).toMatch(/no length before it/);
    // Symbols 18 and 8: 8 is '0', 18 is '1'. 258 zeros (138 + 120) leave no end-of-block code.
    const b = dynamic(257, 1, [0, 0, 1, 0, 1]).code(1, 1).put(127, 7).code(1, 1).put(109, 7);
    expect(refusal(b.bytes(), 1).message).toMatch(/without the end-of-block symbol/);
    // Zeros past the end of the list: 138 + 138 > 258.
    expect(refusal(dynamic(257, 1, [0, 0, 1, 0, 1]).code(1, 1).put(127, 7).code(1, 1).put(127, 7).bytes(), 1).message).toMatch(/past the end/);
  });
});

describe('readSection bounds the allocation by what a stream can hold', () => {
  function section(declared: number, stored: Uint8Array): ByteReader {
    const w = new ByteWriter();
    w.varint(declared);
    w.varint(stored.length);
    w.bytes(stored);
    return new ByteReader(w.finish(), 'tile 3', 100, 'file offset');
  }

  it('accepts zlib level 9 on a mebibyte of zeros, close to the largest ratio DEFLATE allows', () => {
    const s = new Uint8Array(zlib.deflateRawSync(new Uint8Array(1 << 20), { level: 9 }));
    expect((1 << 20) / s.length).toBeGreaterThan(1000);
    expect(readSection(section(1 << 20, s), 'values', 1 << 20).length).toBe(1 << 20);
  });

  it(`refuses a raw length above ${MAX_INFLATE_RATIO} times the stored length before inflating, naming the section's offset`, () => {
    let e: unknown = null;
    try {
      readSection(section(MAX_INFLATE_RATIO * 2 + 1, Uint8Array.of(0x03, 0x00)), 'residual', 1 << 24, false);
    } catch (x) {
      e = x;
    }
    expect(e).toBeInstanceOf(FormatError);
    expect((e as FormatError).code).toBe(FormatCode.Malformed);
    expect((e as FormatError).message).toMatch(/^tile 3: residual declares 2065 raw bytes, more than any 2-byte DEFLATE stream can hold \(section at file offset 100\)$/);
  });

  it('names the offending stored byte of an invalid stream', () => {
    let e: unknown = null;
    try {
      readSection(section(4, Uint8Array.of(0x07, 0, 0, 0)), 'mask', 4);
    } catch (x) {
      e = x;
    }
    expect((e as FormatError).message).toMatch(/^tile 3: mask is not a valid DEFLATE stream: reserved block type 3 \(section at file offset 100, stored byte 0 of 4\)$/);
  });
});
