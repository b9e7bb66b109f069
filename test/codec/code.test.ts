/**
 * Coded integer streams (src/codec/code-encode.ts, code-decode.ts): the
 * binary adaptive range coder and the binarisation of spec/FORMAT.md,
 * "Coded integer streams".
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { CodeStreamError, decodeInts } from '../../src/codec/code-decode.js';
import { encodeInts, encodeIntsWithin } from '../../src/codec/code-encode.js';
import { Cell } from '../../src/codec/mask.js';
import { kernels } from '../../src/wasm/kernels.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { checkWithin } from './within.js';
import { mulberry32 } from '../rng.js';

function roundTrip(values: Int32Array, m: number, n: number, codes: Uint8Array | null): Int32Array {
  const bytes = encodeInts(values, m, n, codes);
  const out = new Int32Array(m * n).fill(12345);
  decodeInts(bytes, m, n, codes, out);
  return out;
}

/** A two-sided geometric variable: P(|v| = k) proportional to theta^k, sign fair. */
function geometric(rand: () => number, theta: number): number {
  const k = Math.floor(Math.log(1 - rand()) / Math.log(theta));
  return k === 0 ? 0 : rand() < 0.5 ? -k : k;
}

// Every test twice: with the WebAssembly decoder (kernels/ints.ts) and with the JavaScript one.
describe.each(['auto', 'js'] as const)('coded integer streams (kernels %s)', (mode) => {
  useKernelMode(mode);

  it('round-trip any grid of integers with |v| <= 2^30, bit for bit', () => {
    const limit = 0x40000000;
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 24 }),
        fc.integer({ min: 1, max: 24 }),
        fc.array(fc.oneof(fc.integer({ min: -3, max: 3 }), fc.integer({ min: -limit, max: limit }), fc.constantFrom(-limit, limit, 0)), { minLength: 576, maxLength: 576 }),
        (m, n, pool) => {
          const v = Int32Array.from({ length: m * n }, (_, c) => pool[c]);
          expect(Array.from(roundTrip(v, m, n, null))).toEqual(Array.from(v));
        },
      ),
      { numRuns: 300 },
    );
  });

  it('round-trip sparse grids (long runs of zeros: the run loop of the decoder) of any shape, bit for bit', () => {
    // Mostly zeros with a few non-zero codes, so runs end on a non-zero code to the up-right, on a non-zero
    // code itself, and at the end of rows; tiles of one row and one column too.
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 40 }), fc.integer({ min: 1, max: 40 }), fc.integer({ min: 1, max: 1 << 20 }), fc.constantFrom(0.002, 0.02, 0.2), (m, n, seed, rate) => {
        const rand = mulberry32(seed);
        const v = Int32Array.from({ length: m * n }, () => (rand() < rate ? geometric(rand, 0.5) || 1 : 0));
        expect(Array.from(roundTrip(v, m, n, null))).toEqual(Array.from(v));
      }),
      { numRuns: 300 },
    );
  });

  it('skip cells that are not valid: they decode as 0 and cost nothing', () => {
    const rand = mulberry32(7);
    const m = 40;
    const n = 50;
    const v = new Int32Array(m * n);
    const codes = new Uint8Array(m * n);
    for (let c = 0; c < m * n; c++) {
      if (rand() < 0.3) codes[c] = Cell.Fill;
      else v[c] = geometric(rand, 0.6);
    }
    expect(Array.from(roundTrip(v, m, n, codes))).toEqual(Array.from(v));
    const all = encodeInts(new Int32Array(m * n), m, n, new Uint8Array(m * n).fill(Cell.NaN));
    // Nothing coded: only the flush bytes.
    expect(all.length).toBe(4);
  });

  it('code i.i.d. values within 2% of their entropy, never below it', () => {
    // Shannon's source coding theorem (Shannon 1948): no code beats n x H bits on
    // average for an i.i.d. source; an adaptive binary model should approach it
    // (the 2% allowance is common practice, no source).
    for (const theta of [0.3, 0.7, 0.95]) {
      const rand = mulberry32(Math.round(theta * 1000));
      const n = 200_000;
      const v = Int32Array.from({ length: n }, () => geometric(rand, theta));
      // Entropy of the two-sided geometric law, from its probabilities.
      let h = 0;
      const pk = (k: number) => (1 - theta) * theta ** k; // P(|v| = k)
      for (let k = 0; k < 2000; k++) {
        const p = pk(k);
        if (p < 1e-300) break;
        h -= k === 0 ? p * Math.log2(p) : p * (Math.log2(p / 2));
      }
      const bits = 8 * encodeInts(v, 1, n, null).length;
      expect(bits / n).toBeGreaterThan(h * 0.99); // a sample's empirical entropy may dip a little below h
      expect(bits / n).toBeLessThan(h * 1.02 + 0.01);
    }
  });

  it('use the neighbourhood: a field whose activity varies costs less than its order-0 entropy', () => {
    // Half the rows quiet (theta 0.2), half busy (theta 0.9), in bands of 8 rows: the
    // order-0 entropy of the mixture exceeds the average of the two entropies (concavity
    // of entropy; from memory), and the context model should get close to the average.
    const rand = mulberry32(99);
    const m = 256;
    const n = 256;
    const v = new Int32Array(m * n);
    for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) v[i * n + j] = geometric(rand, (i >> 3) % 2 ? 0.9 : 0.2);
    const counts = new Map<number, number>();
    for (const x of v) counts.set(x, (counts.get(x) ?? 0) + 1);
    let h0 = 0;
    for (const c of counts.values()) h0 -= (c / v.length) * Math.log2(c / v.length);
    const bits = 8 * encodeInts(v, m, n, null).length;
    expect(bits / v.length).toBeLessThan(0.9 * h0);
  });

  it('refuse truncated streams, trailing bytes and values beyond 2^30', () => {
    const rand = mulberry32(3);
    const v = Int32Array.from({ length: 500 }, () => geometric(rand, 0.8));
    const bytes = encodeInts(v, 20, 25, null);
    const out = new Int32Array(500);
    expect(() => decodeInts(bytes.subarray(0, bytes.length - 1), 20, 25, null, out)).toThrow(CodeStreamError);
    const longer = new Uint8Array(bytes.length + 1);
    longer.set(bytes);
    expect(() => decodeInts(longer, 20, 25, null, out)).toThrow(/follow the end of the stream/);
    expect(() => decodeInts(new Uint8Array(3), 1, 1, null, out)).toThrow(/at least 4 bytes/);
    // No encoder starts a stream at the top of the range.
    expect(() => decodeInts(new Uint8Array(64).fill(0xff), 1, 1, null, out)).toThrow(/FF FF FF FF/);
    // Just below it every adaptive decision comes out 1, so the first value's class runs
    // to 30 and its bits towards all ones: beyond 2^30, or off the halved range.
    const top = new Uint8Array(64).fill(0xff);
    top[3] = 0xfe;
    expect(() => decodeInts(top, 1, 1, null, out)).toThrow(/exceeds 2\^30|outside both halves/);
  });

  it('decode arbitrary bytes to values or a CodeStreamError, nothing else', () => {
    fc.assert(
      fc.property(fc.uint8Array({ minLength: 0, maxLength: 80 }), fc.integer({ min: 1, max: 12 }), fc.integer({ min: 1, max: 12 }), (bytes, m, n) => {
        const out = new Int32Array(m * n);
        try {
          decodeInts(bytes, m, n, null, out);
          for (const x of out) expect(Math.abs(x)).toBeLessThanOrEqual(0x40000000);
        } catch (e) {
          expect(e).toBeInstanceOf(CodeStreamError);
        }
      }),
      { numRuns: 2000 },
    );
  });
});

describe('a coded stream with a length limit (encodeIntsWithin)', () => {
  it('is the stream itself when it fits, and null only when the stream is longer than the limit; and it stops', () => {
    // Sparse to dense grids of geometric magnitudes: stopping must never change what is kept (the callers keep a stream under a limit).
    checkWithin(encodeInts, encodeIntsWithin, (rand, cells) => {
      const rate = [0.05, 0.5, 1][Math.floor(rand() * 3)];
      return Int32Array.from({ length: cells }, () => (rand() < rate ? (rand() < 0.5 ? -1 : 1) * (geometric(rand, 0.2) + 1) : 0));
    });
  });
});

describe('the WebAssembly integer decoder', () => {
  useKernelMode('auto');

  /** decodeInts on the JavaScript path and with the kernel: each one's values, or its error's message. */
  function decodeBoth(bytes: Uint8Array, m: number, n: number, codes: Uint8Array | null): { js: { out?: number[]; error?: string }; wasm: { out?: number[]; error?: string } } {
    return onBothPaths(() => {
      const out = new Int32Array(m * n).fill(7);
      try {
        decodeInts(bytes, m, n, codes, out);
        return { out: Array.from(out) };
      } catch (e) {
        expect(e).toBeInstanceOf(CodeStreamError);
        return { error: (e as Error).message };
      }
    });
  }

  it('is there in Node 20', () => {
    expect(kernels()).not.toBeNull();
  });

  it('gives the JavaScript\'s values or its error message on streams made by the encoder, cut, lengthened or damaged, with and without a mask (fast-check)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 14 }),
        fc.integer({ min: 1, max: 14 }),
        fc.constantFrom(0.3, 0.8, 0.97),
        fc.boolean(),
        fc.integer({ min: 0, max: 2 ** 31 - 1 }),
        fc.constantFrom('whole', 'cut', 'longer', 'flip'),
        (m, n, theta, masked, seed, damage) => {
          const rand = mulberry32(seed);
          const v = Int32Array.from({ length: m * n }, () => Math.max(-(2 ** 30), Math.min(2 ** 30, geometric(rand, theta) * (rand() < 0.1 ? 2 ** 24 : 1))));
          const codes = masked ? Uint8Array.from({ length: m * n }, () => (rand() < 0.3 ? Cell.Fill : Cell.Valid)) : null;
          if (codes) for (let c = 0; c < v.length; c++) if (codes[c] !== Cell.Valid) v[c] = 0;
          let bytes = encodeInts(v, m, n, codes);
          if (damage === 'cut') bytes = bytes.subarray(0, Math.max(4, bytes.length - 1 - Math.floor(rand() * 3)));
          if (damage === 'longer') bytes = Uint8Array.from([...bytes, 0, 0x5a]);
          if (damage === 'flip') {
            bytes = bytes.slice();
            bytes[Math.floor(rand() * bytes.length)] ^= 1 << Math.floor(rand() * 8);
          }
          const { js, wasm } = decodeBoth(bytes, m, n, codes);
          expect(wasm).toEqual(js);
          if (damage === 'whole') expect(js.out).toEqual(Array.from(v));
        },
      ),
      { numRuns: 400 },
    );
  });

  it('gives the JavaScript\'s values or its error message on arbitrary bytes (fast-check)', () => {
    fc.assert(
      fc.property(fc.uint8Array({ minLength: 4, maxLength: 80 }), fc.integer({ min: 1, max: 12 }), fc.integer({ min: 1, max: 12 }), (bytes, m, n) => {
        const { js, wasm } = decodeBoth(bytes, m, n, null);
        expect(wasm).toEqual(js);
      }),
      { numRuns: 1000 },
    );
  });

  it('stops on a value beyond 2^30 and on a direct bit off the range with the JavaScript\'s message', () => {
    // As in the test of the refusals above: just below the top of the range every adaptive decision is 1.
    for (const last of [0xfe, 0xfd, 0xf0, 0x80]) {
      const top = new Uint8Array(64).fill(0xff);
      top[3] = last;
      const { js, wasm } = decodeBoth(top, 1, 1, null);
      if (last === 0xfe) expect(js.error).toMatch(/exceeds 2\^30|outside both halves/);
      expect(wasm).toEqual(js);
    }
  });
});

