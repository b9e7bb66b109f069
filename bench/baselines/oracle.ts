/**
 * Baseline 6, for RMSE-type bounds only: the Eckart-Young oracle. For a
 * 64x64 tiling, the best rank-r approximation of a tile leaves exactly the
 * energy of its discarded singular values (Eckart-Young-Mirsky theorem), and
 * storing it takes r (m + n) factor values. The fewest values any
 * rank-truncated tiling needs for a field RMSE tau is then a knapsack over
 * all tiles' singular values with the budget (valid cells) x tau^2; its
 * fractional relaxation (discard singular values in order of s^2 / (m + n),
 * the last one in part) is solved exactly by that greedy order and is never
 * above the best integral choice, so the count is a floor. It is reported as
 * values and as bytes at 32 bits per value; there is nothing to decode.
 */
import { svd } from '../../src/linalg/svd.js';

/** Singular values of one tile and the factor values one rank of it costs. */
export interface TileSpectrum {
  s: Float64Array;
  cost: number;
}

/** Singular values of every tile (missing cells already filled). */
export function tileSpectra(filled: Float64Array, rows: number, cols: number, tile = 64): TileSpectrum[] {
  const out: TileSpectrum[] = [];
  for (let i0 = 0; i0 < rows; i0 += tile) {
    for (let j0 = 0; j0 < cols; j0 += tile) {
      const m = Math.min(tile, rows - i0);
      const n = Math.min(tile, cols - j0);
      const a = new Float64Array(m * n);
      for (let i = 0; i < m; i++) a.set(filled.subarray((i0 + i) * cols + j0, (i0 + i) * cols + j0 + n), i * n);
      out.push({ s: svd(a, m, n).s, cost: m + n });
    }
  }
  return out;
}

/** The floor: factor values kept (rounded up) for a total squared-error budget. */
export function oracleValues(spectra: TileSpectrum[], budget: number): number {
  const items: { e: number; cost: number }[] = [];
  let total = 0;
  for (const t of spectra) {
    for (const s of t.s) {
      items.push({ e: s * s, cost: t.cost });
      total += t.cost;
    }
  }
  // Within a tile s^2 / cost falls with rank, so this order always discards a tile's smallest first.
  items.sort((a, b) => a.e / a.cost - b.e / b.cost);
  let left = budget;
  let saved = 0;
  for (const it of items) {
    if (it.e <= left) {
      left -= it.e;
      saved += it.cost;
    } else {
      saved += (it.cost * left) / it.e;
      break;
    }
  }
  return Math.ceil(total - saved - 1e-9);
}
