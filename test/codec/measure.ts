/**
 * Test-side measurement, written independently of src/: which cells are
 * valid, the error of decoded values, per-tile figures in row-major tile
 * order, and bit-level comparison of special cells. Not a test file itself.
 */
import { expect } from 'vitest';
import type { Archive } from '../../src/archive.js';
import type { Dtype, FloatArray } from '../../src/types.js';

/** The 32-bit words of a typed array (one per f32, two per f64, little-endian host). */
export function words(a: FloatArray): Uint32Array {
  return new Uint32Array(a.buffer, a.byteOffset, a.byteLength / 4);
}

/** Words per value of a dtype. */
export function wordsPer(dtype: Dtype): number {
  return dtype === 'f32' ? 1 : 2;
}

/**
 * Cells that the bound applies to: finite and not bit-identical to the fill
 * value in the field's dtype (a NaN fill matches nothing; NaNs are missing anyway).
 */
export function validCells(values: FloatArray, dtype: Dtype, fill: number | null): Uint8Array {
  const out = new Uint8Array(values.length);
  let fw: Uint32Array | null = null;
  if (fill !== null && !Number.isNaN(fill)) fw = words(dtype === 'f32' ? new Float32Array([fill]) : new Float64Array([fill]));
  const w = words(values);
  const k = wordsPer(dtype);
  for (let c = 0; c < values.length; c++) {
    if (!Number.isFinite(values[c])) continue;
    if (fw !== null && w[c * k] === fw[0] && (k === 1 || w[c * k + 1] === fw[1])) continue;
    out[c] = 1;
  }
  return out;
}

/** [min, max] over valid cells, or null. */
export function validRange(values: FloatArray, valid: Uint8Array): [number, number] | null {
  let lo = Infinity;
  let hi = -Infinity;
  for (let c = 0; c < values.length; c++) {
    if (!valid[c]) continue;
    lo = Math.min(lo, values[c]);
    hi = Math.max(hi, values[c]);
  }
  return lo <= hi ? [lo, hi] : null;
}

export interface TileFigures {
  valid: number;
  maxErr: number;
  rmse: number;
}

/** Per-tile and whole-field error figures of decoded values, measured here. */
export interface Measured {
  tiles: TileFigures[];
  summary: TileFigures;
  /** Special (non-valid) cells whose bits differ between original and decoded. */
  specialMismatches: number;
  /** Valid cells whose decoded value is not finite. */
  nonFinite: number;
}

/**
 * Measure decoded against original. Squared errors are taken after scaling by
 * a power of two (exact) chosen from the largest error, so that neither tiny
 * (1e-300) nor huge (1e300) errors overflow or underflow when squared.
 */
export function measure(
  orig: FloatArray,
  dec: FloatArray,
  shape: readonly number[],
  tile: readonly number[],
  dtype: Dtype,
  fill: number | null,
): Measured {
  const [rows, cols] = shape;
  const [tr, tc] = tile;
  const valid = validCells(orig, dtype, fill);
  const ow = words(orig);
  const dw = words(dec);
  const k = wordsPer(dtype);
  let specialMismatches = 0;
  let nonFinite = 0;
  for (let c = 0; c < orig.length; c++) {
    if (valid[c]) {
      if (!Number.isFinite(dec[c])) nonFinite++;
      continue;
    }
    for (let q = 0; q < k; q++) {
      if (ow[c * k + q] !== dw[c * k + q]) {
        specialMismatches++;
        break;
      }
    }
  }
  let globalMax = 0;
  for (let c = 0; c < orig.length; c++) if (valid[c]) globalMax = Math.max(globalMax, Math.abs(orig[c] - dec[c]));
  // Scale 2^s with s chosen so the largest error becomes about 1.
  const s = globalMax > 0 && Number.isFinite(globalMax) ? -Math.round(Math.log2(globalMax)) : 0;
  const scale = (d: number) => d * 2 ** Math.trunc(s / 2) * 2 ** (s - Math.trunc(s / 2));
  const unscale = (r: number) => r * 2 ** -Math.trunc(s / 2) * 2 ** -(s - Math.trunc(s / 2));
  const gr = Math.ceil(rows / tr);
  const gc = Math.ceil(cols / tc);
  const tiles: TileFigures[] = [];
  let totalSse = 0;
  let totalValid = 0;
  for (let ti = 0; ti < gr; ti++) {
    for (let tj = 0; tj < gc; tj++) {
      let n = 0;
      let max = 0;
      let sse = 0;
      for (let i = ti * tr; i < Math.min(rows, (ti + 1) * tr); i++) {
        for (let j = tj * tc; j < Math.min(cols, (tj + 1) * tc); j++) {
          const c = i * cols + j;
          if (!valid[c]) continue;
          const d = Math.abs(orig[c] - dec[c]);
          n++;
          if (!(d <= max)) max = d;
          const e = scale(d);
          sse += e * e;
        }
      }
      totalSse += sse;
      totalValid += n;
      tiles.push({ valid: n, maxErr: max, rmse: n > 0 ? unscale(Math.sqrt(sse / n)) : 0 });
    }
  }
  const summary = {
    valid: totalValid,
    maxErr: tiles.reduce((m, t) => (t.maxErr > m ? t.maxErr : m), 0),
    rmse: totalValid > 0 ? unscale(Math.sqrt(totalSse / totalValid)) : 0,
  };
  return { tiles, summary, specialMismatches, nonFinite };
}

/** a and b agree to `rel` relative (both 0 counts as agreeing). */
export function close(a: number, b: number, rel = 1e-12): boolean {
  if (a === b) return true;
  return Math.abs(a - b) <= rel * Math.max(Math.abs(a), Math.abs(b));
}

/**
 * a is b as the index records tile errors: rounded up to binary32
 * (spec/FORMAT.md, section 7.3), so a is at least b and at most one
 * binary32 step (2^-23 relative) above it, each to `rel` for b's own
 * rounding.
 */
export function closeUp32(a: number, b: number, rel = 1e-12, tol = 0): boolean {
  if (a === b) return true;
  // A recorded figure is the measured one rounded up: to binary32 (spec/FORMAT.md 7.5), or to a share of
  // the tolerance, tol / 65535 apart (7.3, width code 3); either way within the slack the binary32 rounding
  // always gave the writer's own measurement (a scaled sum of squares) against this one.
  return a >= b * (1 - rel) && a <= b * (1 + 2 ** -23) * (1 + rel) + (tol / 65535) * (1 + 1e-9);
}

/** Expect the index's recorded figures of field 0 to equal what `m` measured (tile errors rounded up to binary32). */
export async function expectIndexMatches(archive: Archive, m: Measured, name?: string): Promise<void> {
  const ix = await archive.fieldIndex(name);
  const tol = archive.header.fields.find((f) => name === undefined || f.name === name)?.bound.tolerance ?? 0;
  expect(ix.valid.length).toBe(m.tiles.length);
  m.tiles.forEach((t, i) => {
    expect(ix.valid[i], `tile ${i} valid`).toBe(t.valid);
    expect(closeUp32(ix.max_err[i], t.maxErr, 1e-12, tol), `tile ${i} max_err recorded ${ix.max_err[i]} measured ${t.maxErr}`).toBe(true);
    expect(closeUp32(ix.rmse[i], t.rmse, 1e-12, tol), `tile ${i} rmse recorded ${ix.rmse[i]} measured ${t.rmse}`).toBe(true);
  });
  expect(ix.summary.valid).toBe(m.summary.valid);
  expect(closeUp32(ix.summary.max_err, m.summary.maxErr, 1e-12, tol), `summary max_err recorded ${ix.summary.max_err} measured ${m.summary.maxErr}`).toBe(true);
  expect(closeUp32(ix.summary.rmse, m.summary.rmse), `summary rmse recorded ${ix.summary.rmse} measured ${m.summary.rmse}`).toBe(true);
}

/** A small deterministic PRNG (mulberry32), uniform in [0, 1). */
export function prng(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** A typed array of the dtype holding `values`. */
export function asDtype(values: ArrayLike<number>, dtype: Dtype): FloatArray {
  return dtype === 'f32' ? Float32Array.from(values) : Float64Array.from(values);
}
