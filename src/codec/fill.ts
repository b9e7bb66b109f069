/**
 * Smooth stand-in values for missing cells before the SVD, so a land mask or
 * a NaN hole does not add rank: each missing cell converges to the mean of its
 * four neighbours (a discrete harmonic fill, by Gauss-Seidel sweeps), starting
 * from the mean of the tile's valid values.
 */
import { Cell } from './mask.js';

/** Replace missing cells of `x` (m x n, in place) by a harmonic fill. */
export function fillMissing(x: Float64Array, codes: Uint8Array, m: number, n: number, mean: number): void {
  const missing: number[] = [];
  for (let c = 0; c < m * n; c++) {
    if (codes[c] !== Cell.Valid) {
      missing.push(c);
      x[c] = mean;
    }
  }
  if (missing.length === 0 || missing.length === m * n) return;
  const sweeps = Math.min(400, 2 * (m + n));
  for (let s = 0; s < sweeps; s++) {
    let change = 0;
    for (const c of missing) {
      const i = (c / n) | 0;
      const j = c - i * n;
      let sum = 0;
      let count = 0;
      if (i > 0) (sum += x[c - n]), count++;
      if (i < m - 1) (sum += x[c + n]), count++;
      if (j > 0) (sum += x[c - 1]), count++;
      if (j < n - 1) (sum += x[c + 1]), count++;
      if (count === 0) continue;
      const v = sum / count;
      change = Math.max(change, Math.abs(v - x[c]));
      x[c] = v;
    }
    if (change === 0) break;
  }
}
