/**
 * The symbol coder's decoder in WebAssembly (kernels/symbols.ts, loaded by
 * src/wasm/symbols.ts) against its JavaScript version
 * (src/codec/code-symbols.ts): the same values bit for bit and the same
 * CodeStreamError message, on streams the encoder writes (random grids,
 * magnitudes up to and at 2^30, escape classes, masks, 1 x n and m x 1),
 * the same streams cut, lengthened, bit-flipped, with a wrong length word
 * or non-zero padding, and on arbitrary bytes.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { CodeStreamError } from '../../src/codec/code-decode.js';
import { decodeSymbols, symbolKernelImage } from '../../src/codec/code-symbols.js';
import { encodeSymbols } from '../../src/codec/code-symbols-encode.js';
import { Cell } from '../../src/codec/mask.js';
import { SYMBOL_KERNELS } from '../../src/wasm/kernels-bytes.js';
import { kernels } from '../../src/wasm/kernels.js';
import { symbolsKernel } from '../../src/wasm/symbols.js';
import { precip, volcano } from '../archive/datasets.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

type Outcome = { out?: number[]; error?: string };

/** decodeSymbols on the JavaScript path and with the kernel: each one's values, or its error's message. */
function decodeBoth(bytes: Uint8Array, m: number, n: number, codes: Uint8Array | null): { js: Outcome; wasm: Outcome } {
  return onBothPaths(() => {
    const out = new Int32Array(m * n).fill(7);
    try {
      decodeSymbols(bytes, m, n, codes, out);
      return { out: Array.from(out) };
    } catch (e) {
      expect(e).toBeInstanceOf(CodeStreamError);
      return { error: (e as Error).message };
    }
  });
}

const LIMIT = 2 ** 30;

/** A value of one of the symbol coder's regimes: zero, small (symbols 1..7), mid-size classes, escapes (k >= 12), up to and at 2^30. */
function valueOf(rand: () => number, mix: number): number {
  const u = rand();
  const sign = rand() < 0.5 ? -1 : 1;
  if (u < mix) return 0;
  if (u < mix + (1 - mix) * 0.5) return sign * Math.floor(1 + rand() * 7);
  if (u < mix + (1 - mix) * 0.8) return sign * Math.floor(rand() * 4096);
  if (u < mix + (1 - mix) * 0.97) return sign * Math.floor(2 ** (12 + 18 * rand()));
  return sign * LIMIT;
}

describe('the WebAssembly symbol decoder', () => {
  useKernelMode('auto');

  it('is there in Node 20, in a module of its own under 4 KiB', () => {
    const k = kernels();
    expect(k).not.toBeNull();
    expect(k?.module(SYMBOL_KERNELS)).not.toBeNull();
  });

  it('runs when called directly, with the values the encoder coded (so the comparisons below compare two decoders)', () => {
    const rand = mulberry32(5);
    const m = 7;
    const n = 9;
    const v = Int32Array.from({ length: m * n }, () => valueOf(rand, 0.3));
    const bytes = encodeSymbols(v, m, n, null);
    // The framing by hand: a one-byte length, then the range stream (spec/FORMAT.md 10.3.8).
    expect(bytes[0]).toBeLessThan(128);
    const code = ((bytes[1] << 24) | (bytes[2] << 16) | (bytes[3] << 8) | bytes[4]) >>> 0;
    const out = new Int32Array(m * n);
    const end = symbolsKernel(bytes, 1, bytes[0], code, m, n, null, out, symbolKernelImage()!);
    expect(end).not.toBeNull();
    expect(end?.status).toBe(0);
    expect(end?.pos).toBe(bytes[0]);
    expect(Array.from(out)).toEqual(Array.from(v));
  });

  it('gives the JavaScript\'s values or its message on encoded grids, whole, cut, lengthened, flipped, re-framed or padded with 1s, with and without a mask (fast-check)', () => {
    fc.assert(
      fc.property(
        fc.oneof(fc.constant(1), fc.integer({ min: 1, max: 24 })),
        fc.oneof(fc.constant(1), fc.integer({ min: 1, max: 24 })),
        fc.constantFrom(0, 0.3, 0.7, 0.95),
        fc.boolean(),
        fc.integer({ min: 0, max: 2 ** 31 - 1 }),
        fc.constantFrom('whole', 'cut', 'longer', 'flip', 'frame', 'pad'),
        (m, n, mix, masked, seed, damage) => {
          const rand = mulberry32(seed);
          const v = Int32Array.from({ length: m * n }, () => valueOf(rand, mix));
          const codes = masked ? Uint8Array.from({ length: m * n }, () => (rand() < 0.3 ? Cell.Fill : Cell.Valid)) : null;
          if (codes) for (let c = 0; c < v.length; c++) if (codes[c] !== Cell.Valid) v[c] = 0;
          let bytes = encodeSymbols(v, m, n, codes);
          if (damage === 'cut') bytes = bytes.subarray(0, Math.max(1, bytes.length - 1 - Math.floor(rand() * 3)));
          if (damage === 'longer') bytes = Uint8Array.from([...bytes, 0, 0x5a].slice(0, bytes.length + 1 + Math.floor(rand() * 2)));
          if (damage === 'flip') {
            bytes = bytes.slice();
            bytes[Math.floor(rand() * bytes.length)] ^= 1 << Math.floor(rand() * 8);
          }
          if (damage === 'frame' && bytes[0] < 128) {
            // The range stream's length off by one or two: bytes move between the range stream and the raw section.
            bytes = bytes.slice();
            bytes[0] = Math.max(0, bytes[0] + [-2, -1, 1, 2][Math.floor(rand() * 4)]);
          }
          if (damage === 'pad') {
            bytes = bytes.slice();
            bytes[bytes.length - 1] |= 1;
          }
          const { js, wasm } = decodeBoth(bytes, m, n, codes);
          expect(wasm).toEqual(js);
          if (damage === 'whole') expect(js.out).toEqual(Array.from(v));
        },
      ),
      { numRuns: 600 },
    );
  });

  it('gives the JavaScript\'s values or its message on arbitrary bytes, with and without a mask (fast-check)', () => {
    fc.assert(
      fc.property(fc.uint8Array({ minLength: 0, maxLength: 80 }), fc.integer({ min: 1, max: 12 }), fc.integer({ min: 1, max: 12 }), fc.boolean(), (bytes, m, n, masked) => {
        const codes = masked ? Uint8Array.from({ length: m * n }, (_, c) => (c % 3 === 1 ? Cell.NaN : Cell.Valid)) : null;
        const { js, wasm } = decodeBoth(bytes, m, n, codes);
        expect(wasm).toEqual(js);
      }),
      { numRuns: 1500 },
    );
  });

  it('gives the JavaScript\'s values on long grids: more than 256 symbols a bucket (every rebuild, halved counts), long zero runs, escapes', () => {
    const rand = mulberry32(51);
    for (const mix of [0, 0.5, 0.97]) {
      const m = 90;
      const n = 110;
      const v = Int32Array.from({ length: m * n }, () => (rand() < mix ? 0 : valueOf(rand, 0) >> Math.floor(rand() * 20)));
      const bytes = encodeSymbols(v, m, n, null);
      const { js, wasm } = decodeBoth(bytes, m, n, null);
      expect(js.out).toEqual(Array.from(v));
      expect(wasm).toEqual(js);
    }
  });

  it('gives the JavaScript\'s values on the vega-datasets grids\' Lorenzo differences, quantized coarser and finer, whole, with missing cells, and in windows of every width mod 4', () => {
    // Source: vega-datasets data/annual-precip.json (168 x 360) and data/volcano.json (61 x 87) hold integers
    // (test/archive/datasets.ts); quantized with steps 1, 8 and 64 their differences range from dense to mostly zero
    // (zero runs, every bucket, rebuilds at row ends).
    for (const g of [precip(), volcano()]) {
      const [m, n] = g.shape;
      for (const step of [1, 8, 64]) {
        const q = Int32Array.from(g.values, (x) => Math.round(x / step));
        const d = new Int32Array(m * n);
        for (let i = 0; i < m; i++) {
          for (let j = 0; j < n; j++) {
            const c = i * n + j;
            const a = j > 0 ? q[c - 1] : 0;
            const b = i > 0 ? q[c - n] : 0;
            d[c] = q[c] - (i === 0 ? a : j === 0 ? b : a + b - (j > 0 ? q[c - n - 1] : 0));
          }
        }
        const whole = decodeBoth(encodeSymbols(d, m, n, null), m, n, null);
        expect(whole.js.out).toEqual(Array.from(d));
        expect(whole.wasm).toEqual(whole.js);
        // The cells below the grid's median value missing (classes Fill), as a mask makes them.
        const sorted = Float64Array.from(g.values).sort();
        const codes = Uint8Array.from(g.values, (x) => (x < sorted[sorted.length >> 1] ? Cell.Fill : Cell.Valid));
        const dm = d.map((x, c) => (codes[c] === Cell.Valid ? x : 0));
        const masked = decodeBoth(encodeSymbols(dm, m, n, codes), m, n, codes);
        expect(masked.js.out).toEqual(Array.from(dm));
        expect(masked.wasm).toEqual(masked.js);
      }
      // Windows of 1 to 9 columns (the kernel reads the row above four cells at a time) and 1 to 3 rows.
      for (let w = 1; w <= 9; w++) {
        for (const h of [1, 2, 3, 17]) {
          const win = Int32Array.from({ length: h * w }, (_, c) => Math.round(g.values[Math.floor(c / w) * n + (c % w) + 5] / 4) - 20);
          const r = decodeBoth(encodeSymbols(win, h, w, null), h, w, null);
          expect(r.js.out).toEqual(Array.from(win));
          expect(r.wasm).toEqual(r.js);
        }
      }
    }
  });

  it('refuses a value beyond 2^30 and a zero symbol after a non-zero flag with the JavaScript\'s message', () => {
    // 2^30 in cell c, then its first raw bit set: 2^30 + 2^28 (as in symbols.test.ts).
    for (const [m, n, c] of [
      [1, 1, 0],
      [3, 5, 7],
      [6, 1, 4],
    ]) {
      const q = new Int32Array(m * n);
      q[c] = LIMIT;
      const b = encodeSymbols(q, m, n, null);
      const bad = b.slice();
      bad[1 + b[0]] |= 0x80;
      const { js, wasm } = decodeBoth(bad, m, n, null);
      expect(js.error).toBe(`value ${c} exceeds 2^30 in magnitude`);
      expect(wasm).toEqual(js);
    }
  });
});
