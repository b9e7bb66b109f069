/**
 * The pointwise check's choice of predictor on tiles with missing cells in
 * the WebAssembly kernels (kernels/masked.ts, loaded by src/wasm/masked.ts)
 * against the JavaScript it stands for: the rough bits (the sum of the bit
 * lengths of |d|) of predict(predictedFill(q, ...)) for each plain predictor
 * (src/codec/reconstruct.ts), -1 where predict() gives null; and correct()
 * and the pointwise search on both paths, bit for bit, on two open datasets
 * with missing cells, odd shapes and codes at the limit.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { Cell, fillWords } from '../../src/codec/mask.js';
import { prepareTile } from '../../src/codec/prepare.js';
import { predict, predictedFill } from '../../src/codec/reconstruct.js';
import { correct, pointwiseFactors } from '../../src/codec/tile-encode.js';
import { encodePointwise } from '../../src/codec/pointwise-search.js';
import { MASKED_KERNELS } from '../../src/wasm/kernels-bytes.js';
import { kernels } from '../../src/wasm/kernels.js';
import { maskedPredictorBits } from '../../src/wasm/masked.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

const LIMIT = 2 ** 30;

/** The JavaScript's figures: rough bits of each plain predictor's differences of the filled codes, -1 for null. */
function reference(q: Int32Array, codes: Uint8Array, m: number, n: number): number[] {
  return [1, 2, 3, 4, 5].map((kind) => {
    const d = predict(predictedFill(q, codes, m, n, LIMIT, kind), m, n, LIMIT, kind);
    if (d === null) return -1;
    // The bit length of each |d| (32 - its leading zeros), summed.
    let s = 0;
    for (const v of d) s += 32 - Math.clz32(Math.abs(v));
    return s;
  });
}

/**
 * A vega-datasets grid (npm package vega-datasets 3.2.1,
 * node_modules/vega-datasets/data/): volcano.json, elevations of Maunga
 * Whau on a 10 m grid (87 wide x 61 high), and annual-precip.json, global
 * annual precipitation of 2016 at 1 degree (360 wide x 168 high).
 */
function vega(name: string): { m: number; n: number; values: (number | null)[] } {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}`, import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: (number | null)[] };
  return { m: g.height, n: g.width, values: g.values };
}

/** Volcano's heights with the cells below `sea` metres missing (the fill value -999), binary32. */
function volcanoCoast(sea: number): { values: Float32Array; m: number; n: number } {
  const g = vega('volcano.json');
  return { values: Float32Array.from(g.values, (v) => ((v as number) < sea ? -999 : (v as number))), m: g.m, n: g.n };
}

describe('the masked-predictor kernels module', () => {
  it('is there in Node 20', () => {
    expect(kernels()?.module(MASKED_KERNELS)).not.toBeNull();
  });
});

describe('the rough bits of the plain predictors on filled codes', () => {
  it('are the JavaScript\'s on random codes of every shape class, with missing cells, up to and past the limit (a property)', () => {
    let nulls = 0;
    let figures = 0;
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 9 }), fc.integer({ min: 1, max: 9 }), fc.integer({ min: 1, max: 2 ** 31 }), fc.constantFrom(3, 1000, 2 ** 29, 2 ** 30), (m, n, seed, scale) => {
        const rand = mulberry32(seed);
        const q = Int32Array.from({ length: m * n }, () => Math.round((rand() * 2 - 1) * scale));
        const codes = Uint8Array.from(q, () => (rand() < 0.3 ? Cell.Fill : Cell.Valid));
        const want = reference(q, codes, m, n);
        const got = maskedPredictorBits(q, codes, m, n);
        expect(got).not.toBeNull();
        expect(Array.from(got!)).toEqual(want);
        for (const v of want) if (v < 0) nulls++;
        figures += want.length;
      }),
      { numRuns: 200, seed: 72 },
    );
    // Both outcomes were met (common practice, no source: a property that never reaches a branch checks nothing of it).
    expect(nulls).toBeGreaterThan(0);
    expect(nulls).toBeLessThan(figures);
  });

  it('are the JavaScript\'s on the codes of vega-datasets volcano.json with its low ground missing, and annual-precip.json with a lattice of cells missing', () => {
    const coast = volcanoCoast(110);
    const precip = vega('annual-precip.json');
    // annual-precip.json has no missing cell: every cell (i, j) with i + 2 j a multiple of 7 is made one (NaN).
    const precipValues = Float32Array.from(precip.values, (v, c) => ((Math.floor(c / precip.n) + 2 * (c % precip.n)) % 7 === 0 ? Number.NaN : (v ?? Number.NaN)));
    for (const [values, m, n, fill] of [
      [coast.values, coast.m, coast.n, -999],
      [precipValues, precip.m, precip.n, null],
    ] as const) {
      const t = prepareTile(values, m, n, 'f32', fillWords(fill, 'f32'));
      expect(t.classes.special).toBeGreaterThan(0);
      // The codes of rank 0 at a step of about a hundredth of the range.
      const c = correct(t, null, 0.5, 1);
      expect(c.raw).toBeDefined();
      const q = c.raw!;
      expect(Array.from(maskedPredictorBits(q, t.classes.codes, m, n)!)).toEqual(reference(q, t.classes.codes, m, n));
    }
  });
});

describe('the pointwise check with missing cells', () => {
  it('gives the same candidate on both paths: vega-datasets volcano.json with its low ground missing, ranks 0 to 4, f32 and f64', () => {
    const coast = volcanoCoast(120);
    for (const dtype of ['f32', 'f64'] as const) {
      const values = dtype === 'f32' ? coast.values : Float64Array.from(coast.values);
      const t = prepareTile(values, coast.m, coast.n, dtype, fillWords(-999, dtype), 0.5);
      for (const rank of [0, 1, 2, 4]) {
        for (const blendToo of [false, true]) {
          const { js, wasm } = onBothPaths(() => {
            const f = rank > 0 ? pointwiseFactors(t, rank, 0.5) : null;
            const c = correct(t, f, 0.5, undefined, undefined, blendToo);
            return { q: c.q && Array.from(c.q), predictor: c.predictor, exceptions: c.exceptions, bits: c.bits, raw: c.raw && Array.from(c.raw) };
          });
          expect(wasm, `${dtype} rank ${rank} blend ${blendToo}`).toEqual(js);
        }
      }
    }
  });

  it('gives the same payloads on both paths: 1 x n, m x 1 and 1 x 1 tiles with missing cells, and vega-datasets annual-precip.json blocks', () => {
    const precip = vega('annual-precip.json');
    const block = (i0: number, j0: number, m: number, n: number) => {
      const out = new Float32Array(m * n);
      for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) out[i * n + j] = precip.values[(i0 + i) * precip.n + j0 + j] ?? Number.NaN;
      return out;
    };
    // annual-precip.json has no missing cell: every third cell of a block is made one (NaN), and in a larger block
    // every cell of a square of 10 x 10 and a column.
    const holed = block(60, 0, 12, 30).map((v, c) => (c % 3 === 1 ? Number.NaN : v));
    const square = block(0, 0, 48, 80).map((v, c) => ((Math.floor(c / 80) >= 20 && Math.floor(c / 80) < 30 && c % 80 >= 40 && c % 80 < 50) || c % 80 === 7 ? Number.NaN : v));
    const cases: [Float32Array, number, number][] = [
      [square, 48, 80],
      [holed, 12, 30],
      [holed.subarray(0, 30), 1, 30],
      [Float32Array.from({ length: 12 }, (_v, i) => holed[i * 30 + 4]), 12, 1],
      [holed.subarray(1, 2), 1, 1],
    ];
    for (const [values, m, n] of cases) {
      for (const e of [1, 20]) {
        const { js, wasm } = onBothPaths(() => Array.from(encodePointwise(prepareTile(values, m, n, 'f32', null, e), e)));
        expect(wasm, `${m} x ${n} e ${e}`).toEqual(js);
      }
    }
  });
});
