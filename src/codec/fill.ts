/**
 * Smooth stand-in values for missing cells before the SVD, so a land mask or
 * a NaN hole does not add rank: each missing cell converges to the mean of its
 * four neighbours (a discrete harmonic fill, by Gauss-Seidel sweeps), starting
 * from the mean of the tile's valid values.
 */
import { Cell } from './mask.js';
import { fillSweepsKernel } from '../wasm/fill.js';

/** Replace missing cells of `x` (m x n, in place) by a harmonic fill. */
export function fillMissing(x: Float64Array, codes: Uint8Array, m: number, n: number, mean: number): void {
  const cells = m * n;
  let count = 0;
  for (let c = 0; c < cells; c++) {
    if (codes[c] !== Cell.Valid) {
      x[c] = mean;
      count++;
    }
  }
  if (count === 0 || count === cells) return;
  // The missing cells in raster order, each marked when its four neighbours are all inside the tile:
  // a sweep visits them in raster order as before, and takes an inner cell's mean without testing
  // for each neighbour.
  const missing = new Int32Array(count);
  const inner = new Uint8Array(count);
  let k = 0;
  for (let c = 0; c < cells; c++) {
    if (codes[c] === Cell.Valid) continue;
    const i = (c / n) | 0;
    const j = c - i * n;
    missing[k] = c;
    inner[k] = i > 0 && i < m - 1 && j > 0 && j < n - 1 ? 1 : 0;
    k++;
  }
  const sweeps = Math.min(400, 2 * (m + n));
  // The WebAssembly kernel where there is one (the same values; src/wasm/fill.ts).
  if (fillSweepsKernel(x, missing, inner, m, n, sweeps)) return;
  for (let s = 0; s < sweeps; s++) {
    let change = 0;
    for (let t = 0; t < count; t++) {
      const c = missing[t];
      let v: number;
      if (inner[t] === 1) {
        // The same additions in the same order as an edge cell's below (up, down, left, right, from +0).
        v = (0 + x[c - n] + x[c + n] + x[c - 1] + x[c + 1]) / 4;
      } else {
        const i = (c / n) | 0;
        const j = c - i * n;
        let sum = 0;
        let near = 0;
        if (i > 0) (sum += x[c - n]), near++;
        if (i < m - 1) (sum += x[c + n]), near++;
        if (j > 0) (sum += x[c - 1]), near++;
        if (j < n - 1) (sum += x[c + 1]), near++;
        if (near === 0) continue;
        v = sum / near;
      }
      change = Math.max(change, Math.abs(v - x[c]));
      x[c] = v;
    }
    if (change === 0) break;
  }
}
