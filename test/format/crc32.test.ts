/**
 * CRC-32 (the reflected 0xEDB88320 polynomial, init and final XOR 0xFFFFFFFF,
 * as in PNG, zlib and ISO 3309 / ITU-T V.42) against published check values,
 * a bitwise reference, and zlib's implementation shipped with Node.
 */
import zlib from 'node:zlib';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { crc32, KERNEL_BYTES } from '../../src/format/crc32.js';
import { crc32Kernel } from '../../src/wasm/crc.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';

const ascii = (s: string) => new TextEncoder().encode(s);

useKernelMode('auto');

/** The textbook bit-at-a-time CRC-32: reflected input, polynomial 0xEDB88320. */
function reference(bytes: Uint8Array, crc = 0): number {
  let c = ~crc >>> 0;
  for (const b of bytes) {
    c ^= b;
    for (let k = 0; k < 8; k++) c = c & 1 ? (c >>> 1) ^ 0xedb88320 : c >>> 1;
  }
  return ~c >>> 0;
}

describe('crc32', () => {
  it('check value of "123456789" is 0xCBF43926', () => {
    // CRC-32/ISO-HDLC check value, as listed in the CRC catalogue (from memory).
    expect(crc32(ascii('123456789'))).toBe(0xcbf43926);
  });

  it('check value of the pangram "The quick brown fox jumps over the lazy dog" is 0x414FA339', () => {
    // Widely quoted CRC-32 test vector (from memory).
    expect(crc32(ascii('The quick brown fox jumps over the lazy dog'))).toBe(0x414fa339);
  });

  it('empty input gives 0, and continuing with nothing changes nothing', () => {
    expect(crc32(new Uint8Array(0))).toBe(0);
    expect(crc32(new Uint8Array(0), 0xcbf43926)).toBe(0xcbf43926);
  });

  it('known single-byte and all-zero values match the bitwise reference', () => {
    // CRC-32 of one zero byte is 0xD202EF8D (from memory); the reference agrees.
    expect(crc32(new Uint8Array([0]))).toBe(0xd202ef8d);
    expect(reference(new Uint8Array([0]))).toBe(0xd202ef8d);
    for (const n of [1, 7, 8, 9, 15, 16, 17, 64, 1000]) expect(crc32(new Uint8Array(n))).toBe(reference(new Uint8Array(n)));
    for (const n of [1, 7, 8, 9, 64]) expect(crc32(new Uint8Array(n).fill(0xff))).toBe(reference(new Uint8Array(n).fill(0xff)));
  });

  it('returns an unsigned 32-bit integer', () => {
    const v = crc32(ascii('123456789'));
    expect(Number.isInteger(v) && v >= 0 && v <= 0xffffffff).toBe(true);
  });

  it('matches the bitwise reference on random inputs of lengths 0..100', () => {
    // Lengths around multiples of 8 exercise the slicing-by-8 loop and the byte tail.
    fc.assert(
      fc.property(fc.uint8Array({ minLength: 0, maxLength: 100 }), (b) => {
        expect(crc32(b)).toBe(reference(b));
      }),
      { seed: 0x32c, numRuns: 500 },
    );
  });

  it('matches the reference on unaligned views into a larger buffer', () => {
    fc.assert(
      fc.property(fc.uint8Array({ minLength: 0, maxLength: 120 }), fc.nat(16), fc.nat(16), (b, head, tail) => {
        const start = Math.min(head, b.length);
        const end = Math.max(start, b.length - tail);
        const view = b.subarray(start, end);
        expect(crc32(view)).toBe(reference(view));
      }),
      { seed: 0x32d, numRuns: 300 },
    );
  });

  it('is incremental: crc32(b, crc32(a)) === crc32(a + b)', () => {
    fc.assert(
      fc.property(fc.uint8Array({ maxLength: 100 }), fc.uint8Array({ maxLength: 100 }), (a, b) => {
        const ab = new Uint8Array(a.length + b.length);
        ab.set(a);
        ab.set(b, a.length);
        expect(crc32(b, crc32(a))).toBe(crc32(ab));
        expect(reference(b, reference(a))).toBe(crc32(ab));
      }),
      { seed: 0x32e, numRuns: 300 },
    );
  });

  it('every split of "123456789" continues to the check value', () => {
    const s = ascii('123456789');
    for (let k = 0; k <= s.length; k++) expect(crc32(s.subarray(k), crc32(s.subarray(0, k)))).toBe(0xcbf43926);
  });

  it('detects every single-bit flip in a 64-byte message', () => {
    // A CRC with a polynomial of more than one term detects all single-bit errors (from memory).
    const msg = Uint8Array.from({ length: 64 }, (_, i) => (i * 37) & 0xff);
    const base = crc32(msg);
    for (let bit = 0; bit < 64 * 8; bit++) {
      const m = msg.slice();
      m[bit >> 3] ^= 1 << (bit & 7);
      expect(crc32(m)).not.toBe(base);
    }
  });

  it.runIf(typeof (zlib as { crc32?: unknown }).crc32 === 'function')('agrees with zlib.crc32 (Node >= 20.15) on random inputs', () => {
    // zlib's CRC-32 as shipped in Node: an independent reference implementation.
    const z = (zlib as unknown as { crc32(b: Uint8Array, v?: number): number }).crc32;
    fc.assert(
      fc.property(fc.uint8Array({ maxLength: 300 }), fc.uint8Array({ maxLength: 40 }), (a, b) => {
        expect(crc32(a)).toBe(z(a));
        expect(crc32(b, crc32(a))).toBe(z(b, z(a)));
      }),
      { seed: 0x32f, numRuns: 300 },
    );
    expect(z(ascii('123456789'))).toBe(0xcbf43926);
  });

  it('gives the same CRCs on long inputs in the WebAssembly kernel and in JavaScript: the bitwise reference\'s, and zlib\'s where Node has it', () => {
    // Lengths around the kernel's threshold (KERNEL_BYTES) and its 1 MiB chunks, odd tails, unaligned views, continued CRCs.
    const z = (zlib as unknown as { crc32?(b: Uint8Array, v?: number): number }).crc32;
    const rnd = (() => {
      let s = 0x9e3779b9;
      return () => ((s = (Math.imul(s, 1664525) + 1013904223) >>> 0) >>> 24);
    })();
    const big = Uint8Array.from({ length: (1 << 21) + 40 }, rnd);
    for (const [from, len, start] of [[0, KERNEL_BYTES - 1, 0], [0, KERNEL_BYTES, 0], [3, KERNEL_BYTES + 5, 0], [0, (1 << 18) + 1, 0], [1, (1 << 20) + 3, 0x1234abcd], [7, (1 << 21) + 1, 0], [0, 1 << 20, 0xffffffff]] as const) {
      const bytes = big.subarray(from, from + len);
      const { js, wasm } = onBothPaths(() => crc32(bytes, start));
      expect(wasm, `${len} bytes from ${from}`).toBe(js);
      // And the kernel itself ran (null: no kernels here).
      expect(crc32Kernel(bytes, start)).toBe(js);
      expect(js).toBe(reference(bytes, start));
      if (z) expect(js).toBe(z(bytes, start));
    }
  });
});
