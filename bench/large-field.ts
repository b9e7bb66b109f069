/**
 * The invented large field of bench/pack-large.ts and bench/parts-wall.ts:
 * a smooth analytic surface (a few separable waves and bumps, and a front
 * that bends across it) plus uniform noise of amplitude 1e-3 from a seeded
 * xorshift32, so every run writes the same bytes.
 */
import { NpyBandWriter } from '../src/io/bands.js';
import { xorshift32 } from './rng.js';

/** Rows written per band by the generator. */
export const BAND_ROWS = 256;

/** Rows [r0, r0 + count) of the invented side x side field. */
export function band(side: number, r0: number, count: number, next: () => number): Float32Array {
  const out = new Float32Array(count * side);
  const cx = new Float64Array(side);
  const sx = new Float64Array(side);
  const gx = new Float64Array(side);
  for (let j = 0; j < side; j++) {
    const x = j / side;
    cx[j] = Math.cos(2 * Math.PI * 3 * x);
    sx[j] = Math.sin(2 * Math.PI * 7 * x + 0.4);
    gx[j] = Math.exp(-(((x - 0.62) / 0.18) ** 2));
  }
  for (let i = 0; i < count; i++) {
    const y = (r0 + i) / side;
    const a = Math.sin(2 * Math.PI * 2 * y + 1.1);
    const b = 0.35 * Math.cos(2 * Math.PI * 5 * y);
    const g = 1.2 * Math.exp(-(((y - 0.35) / 0.22) ** 2));
    const bend = 0.3 + 0.08 * Math.sin(2 * Math.PI * 3 * y);
    const o = i * side;
    for (let j = 0; j < side; j++) {
      const x = j / side;
      const front = 0.5 * Math.tanh((x - bend) / 0.01);
      out[o + j] = a * cx[j] + b * sx[j] + g * gx[j] + front + 1e-3 * (2 * next() - 1);
    }
  }
  return out;
}

/** Write the field as .npy, band by band. */
export function writeField(path: string, side: number): void {
  const next = xorshift32(20261202);
  const w = new NpyBandWriter(path, [side, side], 'f32');
  for (let r0 = 0; r0 < side; r0 += BAND_ROWS) w.write(band(side, r0, Math.min(BAND_ROWS, side - r0), next));
  w.close();
}

