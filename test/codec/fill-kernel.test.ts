/**
 * The harmonic fill's sweeps in the WebAssembly kernels (kernels/fill.ts,
 * loaded by src/wasm/fill.ts) against the JavaScript (fillMissing in
 * src/codec/fill.ts), bit for bit: on vega-datasets volcano.json with its
 * low ground missing and annual-precip.json with blocks missing, on tiles
 * of every shape class (1 x n, m x 1, one valid cell), and on values so
 * large that the sums overflow (a change that is NaN never ends the sweeps
 * early on either path).
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { fillMissing } from '../../src/codec/fill.js';
import { Cell } from '../../src/codec/mask.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

/** fillMissing on both paths, from the same values (null as missing, filled from `mean`): each one's values, -0 as '-0'. */
function fillBoth(values: (number | null)[], m: number, n: number, mean: number) {
  const codes = Uint8Array.from(values, (v) => (v === null ? Cell.Fill : Cell.Valid));
  return onBothPaths(() => {
    const x = Float64Array.from(values, (v) => v ?? 0);
    fillMissing(x, codes, m, n, mean);
    return Array.from(x, (v) => (Object.is(v, -0) ? '-0' : v));
  });
}

/**
 * A vega-datasets grid (npm package vega-datasets 3.2.1,
 * node_modules/vega-datasets/data/): volcano.json, elevations of Maunga
 * Whau on a 10 m grid (87 wide x 61 high), and annual-precip.json, global
 * annual precipitation of 2016 at 1 degree (360 wide x 168 high).
 */
function vega(name: string): { m: number; n: number; values: number[] } {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}`, import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: number[] };
  return { m: g.height, n: g.width, values: g.values };
}

describe('the harmonic fill in the kernels', () => {
  it('gives the JavaScript\'s values on vega-datasets volcano.json (below 120 m missing) and annual-precip.json (blocks missing)', () => {
    const volcano = vega('volcano.json');
    const coast = volcano.values.map((v) => (v < 120 ? null : v));
    const a = fillBoth(coast, volcano.m, volcano.n, 150);
    expect(a.js.some((v, c) => coast[c] === null && v !== 150)).toBe(true);
    expect(a.wasm).toEqual(a.js);
    const precip = vega('annual-precip.json');
    // Blocks of 20 x 30 missing on a lattice, and the first column.
    const holes = precip.values.map((v, c) => {
      const i = Math.floor(c / precip.n);
      const j = c % precip.n;
      return (i % 50 < 20 && j % 70 < 30) || j === 0 ? null : v;
    });
    const b = fillBoth(holes, precip.m, precip.n, 0.5);
    expect(b.wasm).toEqual(b.js);
  });

  it('gives the JavaScript\'s values on 1 x n, m x 1 and 2 x 2 tiles, with one valid cell, and with sums that overflow', () => {
    const rand = mulberry32(72);
    const row = Array.from({ length: 17 }, (_v, j) => (j % 4 === 1 ? null : rand() * 10));
    const cases: [(number | null)[], number, number][] = [
      [row, 1, 17],
      [row, 17, 1],
      [[1, null, null, 4], 2, 2],
      [[null, null, 7, null, null, null], 2, 3],
      // Values near the binary64 maximum: the sums overflow to infinity and the changes are NaN.
      [[1.7e308, null, 1.7e308, null, 1.7e308, null, -1.7e308, null, 1.7e308], 3, 3],
    ];
    for (const [values, m, n] of cases) {
      const { js, wasm } = fillBoth(values, m, n, 1);
      expect(wasm, `${m} x ${n}`).toEqual(js);
    }
  });
});
