/**
 * The range finder's product in WebAssembly (kernels/product.ts through
 * src/linalg/product.ts) against the JavaScript mulA: the same bits for
 * every output, on shapes that are and are not multiples of the kernel's
 * blocks (two rows by eight sketch columns), with signed zeros, subnormals,
 * huge values and infinities; NaN outputs compared for NaN-ness only
 * (WebAssembly leaves a NaN's sign and payload open: the WebAssembly core
 * specification, "NaN propagation", from memory).
 */
import { describe, expect, it } from 'vitest';
import { mulA } from '../../src/linalg/mul.js';
import { matrixProducts } from '../../src/linalg/product.js';
import { truncatedSvd } from '../../src/linalg/truncated.js';
import { bandTruncatedSvd } from '../../src/linalg/band-svd.js';
import { kernels, setKernelMode } from '../../src/wasm/kernels.js';
import { entries, firstDifference } from '../float-bits.js';
import { useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

describe('the WebAssembly product', () => {
  it('is there in Node 20 (WebAssembly with 128-bit SIMD since V8 9.1: from memory)', () => {
    expect(kernels()).not.toBeNull();
  });

  it('gives mulA\'s bits for every output, w and w^T, with and without special values', () => {
    const rnd = mulberry32(41);
    const shapes: [number, number, number][] = [
      [1, 1, 1],
      [1, 7, 3],
      [9, 1, 2],
      [1, 1, 9],
      [2, 2, 8],
      [3, 5, 1],
      [5, 3, 9],
      [8, 8, 16],
      [17, 13, 7],
      [13, 17, 10],
      [33, 31, 11],
      [64, 48, 24],
    ];
    for (const [rows, cols, l] of shapes) {
      for (const specials of [false, true]) {
        const w = entries(rows * cols, rnd, specials);
        const g = entries(cols * l, rnd, specials);
        const q = entries(rows * l, rnd, specials);
        const p = matrixProducts(w, rows, cols, l, true);
        const y = new Float64Array(rows * l).fill(7);
        const z = new Float64Array(cols * l).fill(7);
        p.times(g, y);
        p.timesT(q, z);
        p.done();
        const yRef = new Float64Array(rows * l);
        mulA(w, rows, cols, g, l, yRef);
        const wt = new Float64Array(cols * rows);
        for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) wt[j * rows + i] = w[i * cols + j];
        const zRef = new Float64Array(cols * l);
        mulA(wt, cols, rows, q, l, zRef);
        const where = `${rows} x ${cols}, l ${l}, specials ${specials}`;
        expect(firstDifference(y, yRef), where).toBe(-1);
        expect(firstDifference(z, zRef), where).toBe(-1);
        // The test can fail: a sum of ordinary products is not all zeros, and -0 inputs do reach outputs.
        if (!specials) expect(yRef.some((x) => x !== 0)).toBe(true);
      }
    }
  });

  it('keeps a first product of -0 as +0, as a sum started from +0 does (IEEE 754: -0 + +0 = +0)', () => {
    const w = new Float64Array([-0, -0, 1, -0]);
    const g = new Float64Array([1, 1, 1, 1]);
    const p = matrixProducts(w, 2, 2, 2, false);
    const y = new Float64Array(4);
    p.times(g, y);
    p.done();
    expect(Object.is(y[0], 0)).toBe(true);
    expect(Object.is(y[2], 0)).toBe(true);
  });

  it('lets truncatedSvd and bandTruncatedSvd give the same bits on both paths', () => {
    const rnd = mulberry32(7);
    const m = 70;
    const n = 45;
    const a = new Float64Array(m * n);
    for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) a[i * n + j] = Math.sin(0.1 * i * (1 + (j % 5))) + 0.01 * rnd();
    const band = { rows: m, cols: n, bands: (visit: (r0: number, count: number, v: Float64Array) => void) => { for (let r0 = 0; r0 < m; r0 += 16) visit(r0, Math.min(16, m - r0), a.subarray(r0 * n, Math.min(m, r0 + 16) * n)); } };
    const runs = (['auto', 'js'] as const).map((mode) => {
      setKernelMode(mode);
      return { t: truncatedSvd(a, m, n, 6), b: bandTruncatedSvd(band, 5) };
    });
    setKernelMode('auto');
    for (const key of ['u', 's', 'v'] as const) {
      expect(firstDifference(runs[0].t[key], runs[1].t[key]), key).toBe(-1);
      expect(firstDifference(runs[0].b[key], runs[1].b[key]), key).toBe(-1);
    }
  });

  it('holds one use of the memory at a time: a second product made meanwhile runs in JavaScript, with the same bits', () => {
    const rnd = mulberry32(3);
    const w = entries(12 * 10, rnd, false);
    const g = entries(10 * 4, rnd, false);
    const outer = matrixProducts(w, 12, 10, 4, false);
    const inner = matrixProducts(w, 12, 10, 4, false);
    const a = new Float64Array(48);
    const b = new Float64Array(48);
    inner.times(g, b);
    outer.times(g, a);
    inner.done();
    outer.done();
    expect(firstDifference(a, b)).toBe(-1);
  });

  it('makes a larger memory for a large matrix and gives it back after: the next use has a small one', () => {
    const k = kernels();
    const small = k?.memoryBytes ?? 0;
    const oldView = k?.f64 ?? new Float64Array(0);
    const rows = 2100;
    const cols = 2100; // w: 35.3 MB, above the 32 MiB kept (w^T q is formed from w's rows: no transposed copy)
    const w = new Float64Array(rows * cols).fill(1);
    const p = matrixProducts(w, rows, cols, 2, true);
    const y = new Float64Array(rows * 2);
    p.times(new Float64Array(cols * 2).fill(1), y);
    expect(y[0]).toBe(2100);
    expect(k?.memoryBytes).toBeGreaterThan(rows * cols * 8);
    p.done();
    expect(kernels()).toBe(k);
    expect(k?.memoryBytes).toBeLessThanOrEqual(Math.max(small, 131072));
    // No memory was grown in place: the old memory's buffer is not detached (a detached one has length 0),
    // since a detached buffer anywhere slows V8's typed-array code (src/wasm/kernels.ts).
    expect(oldView.byteLength).toBe(small);
    // And the small memory works: the same product as mulA's.
    const q = matrixProducts(w.subarray(0, 12), 3, 4, 1, false);
    const out = new Float64Array(3);
    q.times(new Float64Array([1, 2, 3, 4]), out);
    q.done();
    expect(Array.from(out)).toEqual([10, 10, 10]);
  });
});
