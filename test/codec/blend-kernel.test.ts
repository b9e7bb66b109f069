/**
 * The blend predictor's decoding walk in WebAssembly (kernels/blend.ts,
 * through src/wasm/blend.ts) against the JavaScript walk of
 * src/codec/reconstruct.ts: the same decoded codes, the same answer, and
 * the same cells left when a code beyond the limit stops the walk, on
 * random grids of every size class the walk has (1 x n, m x 1, 2 x 2, and
 * larger), with differences up to the whole Int32 range, where the
 * JavaScript's binary64 sums leave 32 bits.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { decodeInts } from '../../src/codec/code-decode.js';
import { residualPlace } from '../../src/codec/payload.js';
import { predict, Predictor, unpredict } from '../../src/codec/reconstruct.js';
import { pack } from '../../src/pack.js';
import { kernels } from '../../src/wasm/kernels.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';

const LIMIT = 2 ** 30;

/** A vega-datasets 3.2.1 grid (node_modules/vega-datasets/data), as bench/fields.ts loads it: nulls as NaN. */
function vegaGrid(name: string): { rows: number; cols: number; values: Float32Array } {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}.json`, import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: (number | null)[] };
  return { rows: g.height, cols: g.width, values: Float32Array.from(g.values, (v) => (v === null ? NaN : v)) };
}

/** unpredict with the blend on both paths: each path's answer and decoded grid. */
function bothPaths(d: Int32Array, m: number, n: number, limit: number): { js: [boolean, number[]]; wasm: [boolean, number[]] } {
  return onBothPaths((): [boolean, number[]] => {
    const a = d.slice();
    return [unpredict(a, m, n, limit, Predictor.Blend), Array.from(a)];
  });
}

useKernelMode('auto');

describe('the blend walk in WebAssembly', () => {
  it('is there in Node 20', () => {
    expect(kernels()).not.toBeNull();
  });

  it('decodes random differences as the JavaScript does, stops where it stops (fast-check)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 14 }),
        fc.integer({ min: 1, max: 14 }),
        fc.constantFrom(LIMIT, 1000, 0x7fffffff, 0),
        fc.constantFrom(3, 300, 2 ** 20, 2 ** 29, 2 ** 30, 2 ** 31 - 1),
        fc.infiniteStream(fc.double({ min: -1, max: 1, noNaN: true })),
        (m, n, limit, scale, noise) => {
          const it = noise[Symbol.iterator]();
          const d = Int32Array.from({ length: m * n }, () => Math.round(it.next().value * scale));
          const { js, wasm } = bothPaths(d, m, n, limit);
          expect(wasm).toEqual(js);
        },
      ),
      { numRuns: 400 },
    );
  });

  it('restores every code that the encoder\'s predict() turned into differences, as the JavaScript does', () => {
    for (const [m, n] of [
      [1, 9],
      [9, 1],
      [2, 2],
      [1, 1],
      [23, 31],
      [64, 64],
    ]) {
      // A smooth surface with noise: the weights vary from cell to cell.
      const q = Int32Array.from({ length: m * n }, (_, c) => Math.round(400 * Math.sin(0.3 * Math.floor(c / n)) * Math.cos(0.2 * (c % n)) + ((c * 7919) % 13)));
      const d = predict(q, m, n, LIMIT, Predictor.Blend)!;
      const { js, wasm } = bothPaths(d, m, n, LIMIT);
      expect(js).toEqual([true, Array.from(q)]);
      expect(wasm).toEqual(js);
    }
  });

  it('accepts a code at the limit and stops at one past it, in the first row, the first column and inside', () => {
    const m = 5;
    const n = 6;
    for (const cell of [3, 2 * n, 3 * n + 4, m * n - 1]) {
      for (const over of [0, 1]) {
        // All differences 0 but one: that cell decodes to its difference plus a prediction of 0.
        const d = new Int32Array(m * n);
        d[cell] = LIMIT + over;
        const { js, wasm } = bothPaths(d, m, n, LIMIT);
        expect(js[0], `cell ${cell}, over ${over}`).toBe(over === 0);
        expect(wasm).toEqual(js);
        const neg = d.map((x) => -x);
        const both = bothPaths(neg, m, n, LIMIT);
        expect(both.wasm).toEqual(both.js);
      }
    }
  });

  it('stops on a prediction that takes a sum past 2^31 (the JavaScript sums in binary64, the kernel in i64)', () => {
    // Codes near the limit make the parts W + N - NW and 2 W - WW reach 3 x 2^30; a difference of
    // 2^31 - 1 on top of a prediction of 2^30 would wrap in 32-bit arithmetic.
    const m = 4;
    const n = 4;
    const d = new Int32Array(m * n);
    d[0] = LIMIT;
    d[1] = -LIMIT;
    d[n] = -LIMIT;
    d[n + 1] = 2 ** 31 - 1;
    const { js, wasm } = bothPaths(d, m, n, LIMIT);
    expect(js[0]).toBe(false);
    expect(wasm).toEqual(js);
  });

  it('decodes the residual of the volcano grid (vega-datasets) at rel:1e-3 as the JavaScript does, to the original integers', async () => {
    // vega-datasets data/volcano.json: integer heights 94..195, one 61 x 87 tile, stored with the blend
    // and a step of 1 (test/codec/predictors.test.ts), so the read gives the heights back exactly.
    const g = vegaGrid('volcano');
    const bytes = pack(g.values, [g.rows, g.cols], { bound: 'rel:1e-3' });
    const a = await open(bytes);
    const e = await a.tileEntry(undefined, 0);
    const payload = bytes.subarray(e.offset, e.offset + e.length);
    const at = residualPlace(payload)!;
    expect(payload[at.byteAt] & 7).toBe(Predictor.Blend);
    const d = new Int32Array(g.rows * g.cols);
    decodeInts(payload.subarray(at.streamAt, at.streamEnd), g.rows, g.cols, null, d);
    const { js, wasm } = bothPaths(d, g.rows, g.cols, LIMIT);
    expect(js[0]).toBe(true);
    expect(wasm).toEqual(js);
    expect(Array.from((await a.read()).values)).toEqual(Array.from(g.values));
  });
});
