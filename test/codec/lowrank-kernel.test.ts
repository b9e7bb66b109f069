/**
 * The low-rank product in WebAssembly (kernels/lowrank.ts through
 * src/wasm/lowrank.ts) against lowRank in JavaScript
 * (src/codec/reconstruct.ts), and the whole reconstruction (the product,
 * then the residual and the rounding to the dtype) against lowRank then
 * reconstruct: the same bits for every output, on shapes
 * that are and are not multiples of the kernel's blocks (eight and two
 * outputs), ranks 1 to 33, with signed zeros, subnormals, huge values and
 * infinities in the factors and the centre; NaN outputs compared for
 * NaN-ness only (WebAssembly leaves a NaN's sign and payload open: the
 * WebAssembly core specification, "NaN propagation", from memory; a
 * reader refuses a valid cell that is not finite either way).
 */
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { lowRank, reconstruct } from '../../src/codec/reconstruct.js';
import { pack } from '../../src/pack.js';
import { kernels, setKernelMode } from '../../src/wasm/kernels.js';
import { lowRankKernel, reconstructKernel } from '../../src/wasm/lowrank.js';
import { precip } from '../archive/datasets.js';
import { entries, firstDifference } from '../float-bits.js';
import { useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

/** lowRank on the JavaScript path. */
function reference(l: Float64Array, w: Float64Array, m: number, n: number, r: number, center: number): Float64Array {
  const out = new Float64Array(m * n).fill(7);
  const was = setKernelMode('js');
  try {
    lowRank(l, w, m, n, r, center, out);
  } finally {
    setKernelMode(was);
  }
  return out;
}

useKernelMode('auto');

describe('the WebAssembly low-rank product', () => {
  it('is there in Node 20 (WebAssembly with 128-bit SIMD since V8 9.1: from memory)', () => {
    expect(kernels()).not.toBeNull();
  });

  it('gives lowRank\'s bits for every output, with and without special values in the factors and the centre', () => {
    const rnd = mulberry32(51);
    const shapes: [number, number, number][] = [
      [1, 1, 1],
      [1, 7, 3],
      [9, 1, 2],
      [1, 9, 1],
      [2, 2, 8],
      [3, 8, 1],
      [5, 9, 4],
      [4, 16, 5],
      [17, 13, 7],
      [13, 17, 33],
      [6, 31, 11],
      [64, 48, 24],
    ];
    const centres = [0, -0, 1.5, -3e300, 5e-324, Infinity];
    for (const [m, n, r] of shapes) {
      for (const specials of [false, true]) {
        for (const center of centres) {
          const l = entries(m * r, rnd, specials);
          const w = entries(r * n, rnd, specials);
          const out = new Float64Array(m * n + 3).fill(7);
          expect(lowRankKernel(l, w, m, n, r, center, out)).toBe(true);
          const where = `${m} x ${n}, rank ${r}, specials ${specials}, centre ${center}`;
          expect(firstDifference(out.subarray(0, m * n), reference(l, w, m, n, r, center)), where).toBe(-1);
          // Past m n the output is left as it was.
          expect(Array.from(out.subarray(m * n)), where).toEqual([7, 7, 7]);
        }
      }
    }
  });

  it('gives +0 where every product is a zero of either sign, whatever the centre\'s sign (IEEE 754-2019 6.3: (+0) + (-0) is +0 in round to nearest; from memory)', () => {
    const l = Float64Array.of(-0, 1, -1);
    const w = Float64Array.of(-0, 0, -0, 0);
    // l (3 x 1) times w (1 x 4): products +0 and -0, each summed from +0 (+0), then the centre added (+0 either way).
    for (const center of [-0, 0]) {
      const out = new Float64Array(12);
      expect(lowRankKernel(l, w, 3, 4, 1, center, out)).toBe(true);
      for (const x of out) expect(Object.is(x, 0)).toBe(true);
      expect(firstDifference(out, reference(l, w, 3, 4, 1, center))).toBe(-1);
    }
  });

  it('gives lowRank\'s bits on tiles larger than one of its bands of rows (2^17 outputs), and on rows longer than a band', () => {
    const rnd = mulberry32(17);
    for (const [m, n, r] of [
      [1000, 301, 3],
      [3, 140001, 2],
    ]) {
      const l = entries(m * r, rnd, true);
      const w = entries(r * n, rnd, true);
      const out = new Float64Array(m * n);
      expect(lowRankKernel(l, w, m, n, r, -1.25, out)).toBe(true);
      expect(firstDifference(out, reference(l, w, m, n, r, -1.25)), `${m} x ${n}`).toBe(-1);
    }
  });

  it('is what lowRank runs in the default mode, with the same bits', () => {
    const rnd = mulberry32(7);
    for (const r of [1, 2, 3, 4, 5, 8, 16]) {
      const m = 20;
      const n = 27;
      const l = entries(m * r, rnd, true);
      const w = entries(r * n, rnd, true);
      const out = new Float64Array(m * n);
      lowRank(l, w, m, n, r, 0.25, out);
      expect(firstDifference(out, reference(l, w, m, n, r, 0.25)), `rank ${r}`).toBe(-1);
    }
  });

  it('reconstructs a tile as lowRank then reconstruct do: every bit (NaN: NaN-ness), binary32 and binary64, with and without a residual, rank 0 too, and the same finite flag', () => {
    const rnd = mulberry32(52);
    const shapes: [number, number, number][] = [
      [1, 1, 0],
      [1, 1, 1],
      [9, 1, 2],
      [1, 9, 3],
      [7, 13, 0],
      [17, 13, 5],
      [64, 48, 16],
      [700, 300, 2],
    ];
    for (const [m, n, r] of shapes) {
      for (const specials of [false, true]) {
        for (const f32 of [true, false]) {
          for (const withQ of [true, false]) {
            const l = entries(m * r, rnd, specials);
            const w = entries(r * n, rnd, specials);
            const q = withQ ? Int32Array.from({ length: m * n }, () => Math.round((rnd() - 0.5) * (rnd() < 0.05 ? 2 ** 31 : 200))) : null;
            const step = specials && rnd() < 0.5 ? 1e300 : 0.0371;
            const center = specials ? 1e38 : -2.5;
            const make = () => (f32 ? new Float32Array(m * n) : new Float64Array(m * n));
            const got = make();
            const finite = reconstructKernel(l, w, m, n, r, center, q, step, got);
            const acc = new Float64Array(m * n);
            const want = make();
            const was = setKernelMode('js');
            let wantFinite: boolean;
            try {
              lowRank(l, w, m, n, r, center, acc);
              wantFinite = reconstruct(acc, q, step, want);
            } finally {
              setKernelMode(was);
            }
            const where = `${m} x ${n}, rank ${r}, specials ${specials}, f32 ${f32}, residual ${withQ}`;
            expect(finite, where).toBe(wantFinite);
            expect(firstDifference(Float64Array.from(got), Float64Array.from(want)), where).toBe(-1);
          }
        }
      }
    }
  });

  it('finds the one value that is not finite wherever it lies: among the cells done four (binary32) or two (binary64) at a time, and in the rest', () => {
    // 3 x 5 = 15 cells: twelve in steps of four and three left; 15 = 7 steps of two and one left.
    const [m, n] = [3, 5];
    for (const f32 of [true, false]) {
      // 2^30 steps of 1e30 pass binary32's largest finite value, 3.4e38, and of 1e300 binary64's, 1.8e308 (IEEE 754-2019 3.6: from memory).
      const step = f32 ? 1e30 : 1e300;
      for (let c = 0; c < m * n; c++) {
        const q = new Int32Array(m * n).fill(1);
        q[c] = 2 ** 30;
        const got = f32 ? new Float32Array(m * n) : new Float64Array(m * n);
        const want = f32 ? new Float32Array(m * n) : new Float64Array(m * n);
        const finite = reconstructKernel(new Float64Array(0), new Float64Array(0), m, n, 0, 0.5, q, step, got);
        const acc = new Float64Array(m * n);
        const was = setKernelMode('js');
        let wantFinite: boolean;
        try {
          lowRank(new Float64Array(0), new Float64Array(0), m, n, 0, 0.5, acc);
          wantFinite = reconstruct(acc, q, step, want);
        } finally {
          setKernelMode(was);
        }
        expect(wantFinite, `cell ${c}`).toBe(false);
        expect(finite, `cell ${c}, f32 ${f32}`).toBe(false);
        expect(firstDifference(Float64Array.from(got), Float64Array.from(want)), `cell ${c}, f32 ${f32}`).toBe(-1);
      }
    }
  });

  it('reads an archive to the same bits with the kernels and without (annual-precip of vega-datasets at rel:1e-4 in 64 x 64 tiles, binary32 and binary64)', async () => {
    const g = precip();
    for (const dtype of ['f32', 'f64'] as const) {
      const values = dtype === 'f32' ? Float32Array.from(g.values) : Float64Array.from(g.values);
      const bytes = pack(values, g.shape, { bound: 'rel:1e-4', tile: 64 });
      const read = async (): Promise<Float64Array> => {
        const a = await open(bytes);
        const v = (await a.read()).values;
        await a.close();
        return Float64Array.from(v);
      };
      setKernelMode('js');
      const js = await read().finally(() => setKernelMode('auto'));
      const wasm = await read();
      expect(firstDifference(wasm, js), dtype).toBe(-1);
      // And they are the values packed, within the bound (rel:1e-4 of the range, README's table of bounds).
      let lo = Infinity;
      let hi = -Infinity;
      for (const x of values) [lo, hi] = [Math.min(lo, x), Math.max(hi, x)];
      let worst = 0;
      for (let c = 0; c < js.length; c++) worst = Math.max(worst, Math.abs(js[c] - values[c]));
      expect(worst, dtype).toBeLessThanOrEqual(1e-4 * (hi - lo));
    }
  }, 60_000);
});
