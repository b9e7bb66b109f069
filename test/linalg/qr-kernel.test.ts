/**
 * The range finder's orthonormalization in the WebAssembly kernels
 * (kernels/qr.ts, run by src/linalg/product.ts in the memory its products
 * hold) against orthonormalize in src/linalg/truncated.ts, bit for bit (Q,
 * tau and the reflectors left in the sketch, -0 included): on random
 * sketches of several shapes, with zero and exactly dependent columns
 * (reflectors that are the identity), on columns of vega-datasets
 * volcano.json; and truncatedSvd on both paths. Q's orthonormality against
 * a reference library is test/linalg/truncated.test.ts's.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { matrixProducts } from '../../src/linalg/product.js';
import { orthonormalize, truncatedSvd } from '../../src/linalg/truncated.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

const show = (a: Float64Array) => Array.from(a, (v) => (Object.is(v, -0) ? '-0' : v));

/** orthonormalize of the column-major rows x cols sketch y, in JavaScript and in the kernels: each one's q, tau and y after. */
function both(y: Float64Array, rows: number, cols: number) {
  const js = { y: y.slice(), q: new Float64Array(rows * cols), tau: new Float64Array(cols) };
  orthonormalize(js.y, rows, cols, js.q, js.tau);
  const wasm = { y: y.slice(), q: new Float64Array(rows * cols), tau: new Float64Array(cols) };
  // Products with a matrix of `rows` rows hold the memory the orthonormalization runs in.
  const prod = matrixProducts(new Float64Array(rows * 2), rows, 2, cols, true);
  let ran: boolean;
  try {
    ran = prod.orthonormalize(wasm.y, rows, wasm.q, wasm.tau);
  } finally {
    prod.done();
  }
  expect(ran).toBe(true);
  return { js: { y: show(js.y), q: show(js.q), tau: show(js.tau) }, wasm: { y: show(wasm.y), q: show(wasm.q), tau: show(wasm.tau) } };
}

describe('the orthonormalization in the kernels', () => {
  it('is the JavaScript\'s on random sketches of several shapes, odd and even, down to one column', () => {
    const rand = mulberry32(72);
    for (const [rows, cols] of [
      [1, 1],
      [2, 1],
      [5, 5],
      [7, 3],
      [24, 24],
      [61, 24],
      [100, 7],
      [257, 40],
    ]) {
      const y = Float64Array.from({ length: rows * cols }, () => rand() - 0.5);
      const { js, wasm } = both(y, rows, cols);
      expect(wasm, `${rows} x ${cols}`).toEqual(js);
    }
  });

  it('is the JavaScript\'s with zero and exactly dependent columns (identity reflectors), and on columns of vega-datasets volcano.json', () => {
    const rand = mulberry32(11);
    const [rows, cols] = [40, 9];
    const y = Float64Array.from({ length: rows * cols }, () => rand() - 0.5);
    y.fill(0, 2 * rows, 3 * rows);
    for (let t = 0; t < rows; t++) y[5 * rows + t] = 2 * y[t];
    // Below the diagonal zero already in column 0: its reflector is the identity.
    y.fill(0, 1, rows);
    const dependent = both(y, rows, cols);
    expect(dependent.js.tau.filter((v) => v === 0).length).toBeGreaterThan(0);
    expect(dependent.wasm).toEqual(dependent.js);
    // The volcano grid (npm package vega-datasets 3.2.1, node_modules/vega-datasets/data/volcano.json, 87 wide x 61
    // high): its 61 rows as 61 columns of length 87, and its first 24 columns as a 61 x 24 sketch.
    const path = fileURLToPath(new URL('../../node_modules/vega-datasets/data/volcano.json', import.meta.url));
    const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: number[] };
    const rowsAsColumns = Float64Array.from(g.values);
    expect(both(rowsAsColumns, g.width, g.height).wasm).toEqual(both(rowsAsColumns, g.width, g.height).js);
    const sketch = new Float64Array(g.height * 24);
    for (let c = 0; c < 24; c++) for (let i = 0; i < g.height; i++) sketch[c * g.height + i] = g.values[i * g.width + c];
    const v = both(sketch, g.height, 24);
    expect(v.wasm).toEqual(v.js);
  });

  it('leaves truncatedSvd as the JavaScript computes it', () => {
    const rand = mulberry32(5);
    const [m, n] = [90, 70];
    const a = Float64Array.from({ length: m * n }, (_v, c) => Math.sin(c / 37) + 0.1 * (rand() - 0.5));
    const { js, wasm } = onBothPaths(() => {
      const s = truncatedSvd(a, m, n, 12);
      return { u: show(s.u), s: show(s.s), v: show(s.v) };
    });
    expect(wasm).toEqual(js);
  });
});
