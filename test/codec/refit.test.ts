/**
 * The refit of a candidate's right factor (quantizeFactors in
 * src/codec/tile-encode.ts): B = Lq^T A in the WebAssembly kernel
 * (kernels/refit.ts, src/wasm/refit.ts) and in JavaScript, bit for bit the
 * same, and on finite values the same as an independent reference,
 * ml-matrix's product (reference library; its mmul sums each entry from 0
 * in increasing row, a product rounded then added, as the refit does: a
 * zero entry of Lq adds a zero, which leaves such a sum as it is).
 */
import { Matrix } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { prepareTile } from '../../src/codec/prepare.js';
import { pointwiseFactors } from '../../src/codec/tile-encode.js';
import { refitKernel } from '../../src/wasm/refit.js';
import { precip } from '../archive/datasets.js';
import { entries, firstDifference } from '../float-bits.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

/** l (m x r) with about a third of its entries zero (+0 or -0), as a quantized left factor has. */
function leftFactor(m: number, r: number, rnd: () => number, specials: boolean): Float64Array {
  const l = entries(m * r, rnd, specials);
  for (let i = 0; i < l.length; i++) if (rnd() < 0.35) l[i] = rnd() < 0.5 ? 0 : -0;
  return l;
}

/** The refit's sum written out plainly: b[k][j] = sum over i in increasing order of l[i][k] a[i][j], rows with l[i][k] = 0 left out. */
function plainRefit(l: Float64Array, r: number, a: Float64Array, m: number, n: number): Float64Array {
  const b = new Float64Array(r * n);
  for (let k = 0; k < r; k++) {
    for (let j = 0; j < n; j++) {
      let s = 0;
      for (let i = 0; i < m; i++) if (l[i * r + k] !== 0) s += l[i * r + k] * a[i * n + j];
      b[k * n + j] = s;
    }
  }
  return b;
}

describe('the refit kernel', () => {
  it('gives the plain sum\'s bits on odd shapes, several bands, zeros of both signs and special values', () => {
    const rnd = mulberry32(2027);
    // [m, n, r]: single rows and columns, odd widths (the kernel's scalar last column), r below and above 4
    // (its four rows of b at a time), and 70 x 1000 (65 rows a band: two bands).
    const shapes: [number, number, number][] = [[1, 1, 1], [1, 7, 3], [9, 1, 2], [5, 3, 9], [17, 13, 7], [13, 17, 10], [33, 31, 5], [70, 1000, 4]];
    for (const [m, n, r] of shapes) {
      for (const specials of [false, true]) {
        const l = leftFactor(m, r, rnd, specials);
        const a = entries(m * n, rnd, specials);
        // Garbage in b: the kernel writes every entry.
        const b = new Float64Array(r * n).fill(7);
        expect(refitKernel(l, r, a, m, n, b)).toBe(true);
        expect(firstDifference(b, plainRefit(l, r, a, m, n)), `${m} x ${n}, rank ${r}, specials ${specials}`).toBe(-1);
        if (!specials) {
          // ml-matrix: Lq^T A with every term, zeros included.
          const lm = new Matrix(Array.from({ length: m }, (_, i) => Array.from(l.subarray(i * r, i * r + r))));
          const am = new Matrix(Array.from({ length: m }, (_, i) => Array.from(a.subarray(i * n, i * n + n))));
          const ref = Float64Array.from(lm.transpose().mmul(am).to1DArray());
          expect(firstDifference(b, ref), `${m} x ${n}, rank ${r}: ml-matrix`).toBe(-1);
          expect(b.some((x) => x !== 0)).toBe(true);
        }
      }
    }
  });

  it('leaves the work to JavaScript when the kernels are switched off', () => {
    const { js } = onBothPaths(() => refitKernel(new Float64Array(4), 2, new Float64Array(6), 2, 3, new Float64Array(6)));
    expect(js).toBe(false);
  });

  it('gives quantizeFactors the same right factor on both paths, on a tile of a real field', () => {
    // vega-datasets data/annual-precip.json: its 168 x 360 grid as one tile, at a pointwise bound of 1 mm.
    const g = precip();
    const [m, n] = g.shape;
    const orig = Float32Array.from(g.values);
    for (const r of [1, 2, 3, 4, 5, 8, 12]) {
      const run = () => {
        const t = prepareTile(orig, m, n, 'f32', null, 1);
        const f = pointwiseFactors(t, r, 1);
        return f === null ? null : { qw: Array.from(f.qw), w: f.w };
      };
      const { js, wasm } = onBothPaths(run);
      expect(js, `rank ${r}`).not.toBeNull();
      expect(wasm?.qw, `rank ${r}`).toEqual(js?.qw);
      expect(firstDifference(wasm!.w, js!.w), `rank ${r}`).toBe(-1);
    }
  });
});
