/**
 * The Gram matrix in the WebAssembly kernels (kernels/gram.ts, loaded by
 * src/wasm/gram.ts) against gram() in src/linalg/spectrum.ts, bit for bit
 * (Object.is on every entry, so a -0 counts): tall and wide, shapes across
 * the 64-wide blocks and the four-row and eight-row strides (1 x n, m x 1,
 * 1 x 1, odd sides), values of every sign with zeros, and two open
 * datasets; its tridiagonal form in the kernels (kernels/tridiag.ts)
 * against tridiagonalize, including columns whose reflector is none; and
 * gramSingularValues on both paths. Its agreement with a
 * reference library is test/linalg/spectrum.test.ts's (ml-matrix).
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { gram, gramSingularValues, tridiagonalize } from '../../src/linalg/spectrum.js';
import { gramKernel, gramTridiagonalKernel } from '../../src/wasm/gram.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

/** Both matrices, as arrays whose -0 entries read as the string '-0' (toEqual takes -0 for 0). */
function both(a: Float64Array, m: number, n: number): { js: (number | string)[]; wasm: (number | string)[] | null } {
  const show = (g: Float64Array) => Array.from(g, (v) => (Object.is(v, -0) ? '-0' : v));
  const k = gramKernel(a, m, n);
  return { js: show(gram(a, m, n)), wasm: k === null ? null : show(k) };
}

/**
 * A vega-datasets grid (npm package vega-datasets 3.2.1,
 * node_modules/vega-datasets/data/): volcano.json, elevations of Maunga
 * Whau on a 10 m grid (87 wide x 61 high), and annual-precip.json, global
 * annual precipitation of 2016 at 1 degree (360 wide x 168 high; null over
 * some cells, taken as 0 here).
 */
function vega(name: string): { m: number; n: number; values: Float64Array } {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}`, import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: (number | null)[] };
  return { m: g.height, n: g.width, values: Float64Array.from(g.values, (v) => v ?? 0) };
}

/** The tridiagonal form of a's Gram matrix, in JavaScript and in the kernels: diagonal and subdiagonal, -0 as '-0'. */
function tridiagonalBoth(a: Float64Array, m: number, n: number) {
  const k = Math.min(m, n);
  const show = (x: Float64Array) => Array.from(x, (v) => (Object.is(v, -0) ? '-0' : v));
  const d = new Float64Array(k);
  const sub = new Float64Array(k);
  tridiagonalize(gram(a, m, n), k, d, sub);
  const dk = new Float64Array(k);
  const subk = new Float64Array(k);
  expect(gramTridiagonalKernel(a, m, n, dk, subk)).toBe(true);
  return { js: { d: show(d), sub: show(sub) }, wasm: { d: show(dk), sub: show(subk) } };
}

describe('the tridiagonal form in the kernels', () => {
  it('is the JavaScript\'s on random matrices of every size class, and where a column needs no reflector', () => {
    const rand = mulberry32(9);
    for (const [m, n] of [
      [1, 1],
      [2, 5],
      [3, 3],
      [4, 9],
      [12, 7],
      [40, 40],
      [67, 130],
      [129, 64],
    ]) {
      const a = Float64Array.from({ length: m * n }, () => rand() - 0.5);
      const { js, wasm } = tridiagonalBoth(a, m, n);
      expect(wasm, `${m} x ${n}`).toEqual(js);
    }
    // Columns 0 and 3 of a tall matrix zero: rows and columns of the Gram matrix that are zero below the diagonal.
    const [m, n] = [30, 8];
    const a = Float64Array.from({ length: m * n }, (_v, c) => (c % n === 0 || c % n === 3 ? 0 : rand() - 0.5));
    const zero = tridiagonalBoth(a, m, n);
    expect(zero.js.sub.filter((v) => v === 0).length).toBeGreaterThan(1);
    expect(zero.wasm).toEqual(zero.js);
  });

  it('is the JavaScript\'s on vega-datasets volcano.json and annual-precip.json, tall and wide', () => {
    for (const name of ['volcano.json', 'annual-precip.json']) {
      const g = vega(name);
      const t = new Float64Array(g.m * g.n);
      for (let i = 0; i < g.m; i++) for (let j = 0; j < g.n; j++) t[j * g.m + i] = g.values[i * g.n + j] / 1000;
      const scaled = g.values.map((v) => v / 1000);
      const wide = tridiagonalBoth(scaled, g.m, g.n);
      expect(wide.wasm).toEqual(wide.js);
      const tall = tridiagonalBoth(t, g.n, g.m);
      expect(tall.wasm).toEqual(tall.js);
    }
  });
});

describe('the Gram matrix in the kernels', () => {
  it('is the JavaScript\'s, bit for bit, on random matrices of every shape class', () => {
    const rand = mulberry32(72);
    for (const [m, n] of [
      [1, 1],
      [1, 9],
      [9, 1],
      [2, 2],
      [3, 2],
      [2, 3],
      [7, 5],
      [5, 7],
      [64, 64],
      [67, 65],
      [65, 67],
      [130, 129],
      [129, 130],
      [200, 17],
      [17, 203],
    ]) {
      // Signed values over 20 binades, a tenth of them zero (some -0).
      const a = Float64Array.from({ length: m * n }, () => {
        const r = rand();
        if (r < 0.05) return 0;
        if (r < 0.1) return -0;
        return (rand() - 0.5) * 2 ** Math.floor(rand() * 20 - 10);
      });
      const { js, wasm } = both(a, m, n);
      expect(wasm, `${m} x ${n}`).not.toBeNull();
      expect(wasm, `${m} x ${n}`).toEqual(js);
    }
  });

  it('is the JavaScript\'s, bit for bit, on vega-datasets volcano.json and annual-precip.json, whole and in blocks, tall and wide', () => {
    const volcano = vega('volcano.json');
    const precip = vega('annual-precip.json');
    const cases: [Float64Array, number, number][] = [
      [volcano.values, volcano.m, volcano.n],
      [precip.values, precip.m, precip.n],
    ];
    // The transposed grids: tall.
    for (const g of [volcano, precip]) {
      const t = new Float64Array(g.m * g.n);
      for (let i = 0; i < g.m; i++) for (let j = 0; j < g.n; j++) t[j * g.m + i] = g.values[i * g.n + j];
      cases.push([t, g.n, g.m]);
    }
    for (const [a, m, n] of cases) {
      const { js, wasm } = both(a, m, n);
      expect(wasm, `${m} x ${n}`).toEqual(js);
    }
  });

  it('leaves gramSingularValues as the JavaScript computes it, on vega-datasets annual-precip.json', () => {
    const precip = vega('annual-precip.json');
    // Centred, as a prepared tile is.
    let mean = 0;
    for (const v of precip.values) mean += v;
    mean /= precip.values.length;
    const centred = precip.values.map((v) => v - mean);
    const { js, wasm } = onBothPaths(() => Array.from(gramSingularValues(centred, precip.m, precip.n)));
    expect(js.length).toBe(precip.m);
    expect(wasm).toEqual(js);
  });
});
