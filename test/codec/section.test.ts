/**
 * Compressed sections (varint raw length, varint stored length, raw DEFLATE stream
 * of RFC 1951) from src/codec/section.ts.
 *
 * RFC 1951 facts used (from memory): a block starts with BFINAL (1 bit) and
 * BTYPE (2 bits, LSB first); BTYPE 00 is a stored block: after the header
 * bits the stream is byte-aligned and holds LEN and NLEN (one's complement of
 * LEN), little-endian u16 each, then LEN literal bytes. The two bytes 03 00
 * are a final fixed-Huffman block holding only the end-of-block code.
 */
import { deflateSync } from 'fflate';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { FormatCode, FormatError } from '../../src/errors.js';
import { ByteReader, ByteWriter } from '../../src/format/bytes.js';
import { readSection } from '../../src/codec/section.js';
import { writeSection } from '../../src/codec/section-write.js';

/** A section with any declared raw length around any stored bytes. */
function section(declared: number, stored: Uint8Array | number[]): Uint8Array {
  const w = new ByteWriter();
  w.varint(declared);
  w.varint(stored.length);
  w.bytes(Uint8Array.from(stored));
  return w.finish();
}

/** A final stored DEFLATE block holding `data` (at most 65535 bytes). */
function storedBlock(data: Uint8Array): Uint8Array {
  const out = new Uint8Array(5 + data.length);
  out[0] = 0x01; // BFINAL = 1, BTYPE = 00
  out[1] = data.length & 0xff;
  out[2] = data.length >> 8;
  out[3] = ~data.length & 0xff;
  out[4] = (~data.length >> 8) & 0xff;
  out.set(data, 5);
  return out;
}

function thrown(fn: () => unknown): unknown {
  try {
    fn();
  } catch (e) {
    return e;
  }
  return null;
}

function expectFormat(e: unknown, code: string, message?: RegExp): void {
  expect(e).toBeInstanceOf(FormatError);
  expect((e as FormatError).code).toBe(code);
  if (message) expect((e as FormatError).message).toMatch(message);
}

const ascii = (s: string) => new TextEncoder().encode(s);

describe('readSection', () => {
  it('round-trips writeSection for random bytes, consuming exactly the section', () => {
    fc.assert(
      fc.property(fc.uint8Array({ maxLength: 3000 }), fc.uint8Array({ maxLength: 8 }), (raw, after) => {
        const w = new ByteWriter();
        writeSection(w, raw);
        w.bytes(after);
        const r = new ByteReader(w.finish(), 'test');
        const got = readSection(r, 'data', raw.length);
        expect(Array.from(got)).toEqual(Array.from(raw));
        expect(r.remaining).toBe(after.length);
      }),
      { seed: 0x5ec, numRuns: 200 },
    );
  });

  it('reads a hand-built RFC 1951 stored block', () => {
    const text = ascii('stored block, no compression');
    const r = new ByteReader(section(text.length, storedBlock(text)), 'test');
    expect(new TextDecoder().decode(readSection(r, 'text', text.length))).toBe('stored block, no compression');
  });

  it('reads the empty fixed-Huffman block 03 00 as zero bytes', () => {
    const r = new ByteReader(section(0, [0x03, 0x00]), 'test');
    expect(readSection(r, 'empty', 0).length).toBe(0);
  });

  it('refuses a declared length other than the one required, before inflating', () => {
    const raw = ascii('abcdefgh'.repeat(10));
    for (const declared of [0, 79, 81, 2 ** 32 - 1]) {
      const stored = declared === 2 ** 32 - 1 ? [1, 2, 3] : deflateSync(raw);
      const e = thrown(() => readSection(new ByteReader(section(declared, stored), 'tile 7'), 'residual', 80));
      expectFormat(e, FormatCode.Malformed, /tile 7: residual declares \d+ raw bytes where 80 are allowed/);
    }
  });

  it('with a maximum instead of an exact length, refuses only lengths above it', () => {
    const raw = ascii('x'.repeat(50));
    const ok = readSection(new ByteReader(section(50, deflateSync(raw)), 't'), 'mask', 60, false);
    expect(ok.length).toBe(50);
    expectFormat(
      thrown(() => readSection(new ByteReader(section(50, deflateSync(raw)), 't'), 'mask', 49, false)),
      FormatCode.Malformed,
      /at most 49/,
    );
  });

  it('refuses a stream that inflates to more bytes than declared', () => {
    const raw = new Uint8Array(100).map((_, i) => i);
    for (const declared of [0, 1, 50, 99]) {
      const e = thrown(() => readSection(new ByteReader(section(declared, deflateSync(raw)), 'tile 2'), 'values', declared));
      expectFormat(e, FormatCode.Malformed, /tile 2: values inflates to more than/);
    }
    // A stream of a million zero bytes declared as 10: refused without producing them.
    const bomb = deflateSync(new Uint8Array(1 << 20));
    expect(bomb.length).toBeLessThan(2000);
    expectFormat(thrown(() => readSection(new ByteReader(section(10, bomb), 't'), 'values', 10)), FormatCode.Malformed);
  });

  it('refuses a stream that inflates to fewer bytes than declared', () => {
    const raw = new Uint8Array(100).map((_, i) => i);
    for (const declared of [101, 200, 4096]) {
      const e = thrown(() => readSection(new ByteReader(section(declared, deflateSync(raw)), 'tile 2'), 'values', declared));
      expectFormat(e, FormatCode.Malformed, new RegExp(`inflates to 100 bytes, not the declared ${declared}`));
    }
    const e = thrown(() => readSection(new ByteReader(section(5, storedBlock(ascii('abc'))), 't'), 'v', 5));
    expectFormat(e, FormatCode.Malformed, /inflates to 3 bytes/);
  });

  // Found against commit 74b919b: the message read "inflates to more than bytes" (number missing).
  it('the message for a stream that inflates to more says how many bytes were declared', () => {
    const e = thrown(() => readSection(new ByteReader(section(99, deflateSync(new Uint8Array(100))), 't'), 'values', 99));
    expectFormat(e, FormatCode.Malformed, /inflates to more than \d+ bytes/);
  });

  it('refuses bytes that are not DEFLATE, and a stored length past the end', () => {
    // BTYPE 11 is reserved (an error) in RFC 1951.
    expectFormat(thrown(() => readSection(new ByteReader(section(4, [0x07, 0, 0, 0]), 't'), 'v', 4)), FormatCode.Malformed, /not a valid DEFLATE stream/);
    // An empty stored stream.
    expectFormat(thrown(() => readSection(new ByteReader(section(0, []), 't'), 'v', 0)), FormatCode.Malformed);
    const w = new ByteWriter();
    w.varint(4);
    w.varint(1000);
    w.bytes(new Uint8Array(10));
    expectFormat(thrown(() => readSection(new ByteReader(w.finish(), 't'), 'v', 4)), FormatCode.Truncated);
    // A stored length whose varint runs past the end (its only byte has the continuation bit set).
    expectFormat(thrown(() => readSection(new ByteReader(Uint8Array.of(4, 0x80), 't'), 'v', 4)), FormatCode.Truncated);
  });

  it('random bytes after a valid header never escape as anything but FormatError', () => {
    fc.assert(
      fc.property(fc.integer({ min: 0, max: 300 }), fc.uint8Array({ maxLength: 64 }), (declared, junk) => {
        const e = thrown(() => readSection(new ByteReader(section(declared, junk), 't'), 'v', declared));
        if (e !== null) expect(e).toBeInstanceOf(FormatError);
      }),
      { seed: 0x5ed, numRuns: 500 },
    );
  });
});
