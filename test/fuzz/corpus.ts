/**
 * Seed archives for the fuzzer: valid archives of several shapes, dtypes,
 * bound modes and payload kinds, written by this library (pack and
 * ArchiveBuilder). Together they hold every payload feature the format has
 * (test/fuzz/fuzz.test.ts checks it): exact and low-rank tiles, rank 0 and
 * rank > 0, factor codes stored as values (random factors) and as
 * differences along each vector (smooth fields), one and several factor
 * groups (a progressive field, with its prefix column), coded class maps
 * with every cell class (fill, +-Inf, canonical and raw NaN, the raw bits
 * in f32 and f64), residuals with and without Lorenzo prediction, with and
 * without factors, and exceptions; and the header's optional parts (fill
 * values, attributes, an N-D field, a field layer with its two factor
 * fields), and residuals of both coders. The values are generated (sums of
 * separable cosines, spikes, holes; one crop of a vega-datasets grid):
 * seeds only need to be valid archives.
 */
import { ArchiveBuilder, pack } from '../../src/pack.js';
import { MemorySink } from '../../src/format/container.js';
import type { FloatArray } from '../../src/types.js';
import { Rng } from './rng.js';
import { layeredArchive, smoothFactors } from '../format/layered.js';
import { precip } from '../archive/datasets.js';

/** A seed archive and what it was made from. */
export interface Seed {
  name: string;
  bytes: Uint8Array;
}

/** A smooth field of `terms` separable cosine products, scaled and offset. */
function smooth(rows: number, cols: number, seed: number, terms = 2, scale = 1, offset = 0): Float64Array {
  const rng = new Rng(seed, 1);
  const v = new Float64Array(rows * cols);
  for (let k = 0; k < terms; k++) {
    const a = 0.2 + rng.next();
    const fi = 4 * rng.next();
    const fj = 4 * rng.next();
    const pi = 6 * rng.next();
    const pj = 6 * rng.next();
    for (let i = 0; i < rows; i++) {
      const u = Math.cos((fi * i) / Math.max(1, rows - 1) + pi);
      for (let j = 0; j < cols; j++) v[i * cols + j] += a * u * Math.cos((fj * j) / Math.max(1, cols - 1) + pj);
    }
  }
  for (let i = 0; i < v.length; i++) v[i] = scale * (offset + v[i]);
  return v;
}

/** Put NaN (canonical and with payloads), +-Inf and fill cells into a field. */
function holes(v: FloatArray, every: number, fill: number | null): void {
  const words = new Uint32Array(v.buffer, v.byteOffset, v.byteLength / 4);
  const wide = v instanceof Float64Array;
  for (let c = 3; c < v.length; c += every) {
    const kind = (c / every) % 5 | 0;
    if (kind === 0) v[c] = NaN;
    else if (kind === 1) v[c] = Infinity;
    else if (kind === 2) v[c] = -Infinity;
    else if (kind === 3 && fill !== null) v[c] = fill;
    else if (wide) {
      words[2 * c] = 0xdeadbeef; // a NaN with a payload (raw NaN class)
      words[2 * c + 1] = 0x7ff80123;
    } else words[c] = 0x7f800001; // a signalling NaN (raw NaN class)
  }
}

/** Build the seed archives (deterministic). */
export function buildSeeds(): Seed[] {
  const seeds: Seed[] = [];
  const add = (name: string, bytes: Uint8Array) => seeds.push({ name, bytes });

  const lr = smooth(6, 7, 1);
  lr[4] = NaN;
  lr[20] = -999;
  add('lowrank-f64-masked', pack(lr, [6, 7], { bound: 'rel:1e-2', tile: [3, 4], fill: -999, name: 'sample' }));

  add('exact-f32', pack(Float32Array.from(smooth(5, 6, 2, 3, 100)), [5, 6], { bound: 'abs:1e-9', tile: 3, name: 'exact' }));

  add('factors-f64', pack(smooth(16, 16, 3), [16, 16], { bound: 'abs:1e-3', tile: 16, name: 'factors' }));

  const masked = Float32Array.from(smooth(40, 33, 4, 3, 10, 5));
  holes(masked, 7, -1);
  add('masked-f32-rel', pack(masked, [40, 33], { bound: 'rel:1e-3', tile: [16, 12], fill: -1, name: 'masked', attrs: { units: 'K', levels: [1, 2.5, 'x', true] } }));

  // Spikes far beyond what a residual integer holds: exceptions.
  const spiky = smooth(24, 24, 5, 2, 1);
  for (const c of [5, 77, 300, 501]) spiky[c] = 1e12 * (c % 2 ? 1 : -1);
  add('exceptions-f64', pack(spiky, [24, 24], { bound: 'abs:1e-4', tile: 12, name: 'spiky' }));

  // Noise on a smooth field at a fine bound: residuals (with and without Lorenzo prediction).
  const noisy = smooth(32, 32, 6, 2, 1);
  const rng = new Rng(7);
  for (let i = 0; i < noisy.length; i++) noisy[i] += 1e-3 * (rng.next() - 0.5);
  add('residual-f64', pack(noisy, [32, 32], { bound: 'abs:1e-5', tile: 16, name: 'noisy' }));

  // Factors of random vectors (no smoothness along them): their codes are stored as they are, not as differences.
  const rough = new Float64Array(24 * 24);
  const rr = new Rng(15);
  for (let k = 0; k < 3; k++) {
    const u = Array.from({ length: 24 }, () => rr.next() - 0.5);
    const w = Array.from({ length: 24 }, () => rr.next() - 0.5);
    for (let i = 0; i < 24; i++) for (let j = 0; j < 24; j++) rough[i * 24 + j] += u[i] * w[j] * (3 - k);
  }
  add('rough-factors-f64', pack(rough, [24, 24], { bound: 'abs:1e-4', tile: 24, name: 'rough', progressive: true }));

  // A dense residual (annual precipitation of vega-datasets' data/annual-precip.json, rows 60..83, columns 100..139, at a
  // fine bound): its tiles take the symbol coder (spec/FORMAT.md 10.3.8), and the file required flag bit 2.
  const pr = precip();
  const crop = Float32Array.from({ length: 24 * 40 }, (_, c) => pr.values[(60 + Math.floor(c / 40)) * pr.shape[1] + 100 + (c % 40)]);
  add('symbols-f32', pack(crop, [24, 40], { bound: 'rel:1e-4', tile: [12, 20], name: 'precip' }));

  add('rmse-f64', pack(smooth(24, 24, 8, 4), [24, 24], { bound: 'rmse:1e-3', tile: 8, name: 'l2' }));
  add('psnr-f32', pack(Float32Array.from(smooth(20, 30, 9, 3)), [20, 30], { bound: 'psnr:50', tile: 10, name: 'psnr' }));

  add('constant-f32', pack(new Float32Array(32 * 32).fill(273.15), [32, 32], { bound: 'abs:0.01', tile: 8, name: 'constant' }));
  add('one-row-f64', pack(smooth(1, 50, 10), [1, 50], { bound: 'rel:1e-4', tile: [1, 16], name: 'row' }));
  add('all-nan-f64', pack(new Float64Array(8 * 8).fill(NaN), [8, 8], { bound: 'abs:1', tile: 4, name: 'void' }));
  add('tiny-f64', pack(smooth(12, 12, 11, 2, 1e-300), [12, 12], { bound: 'rel:1e-3', tile: 6, name: 'tiny' }));
  // Under an L2 bound a tile's residual step is its own (rate-distortion search), beyond binary32 here: step form 2 (binary64).
  add('tiny-psnr-f64', pack(smooth(12, 12, 13, 2, 1e-300), [12, 12], { bound: 'psnr:50', tile: 6, name: 'faint' }));
  add('huge-f64', pack(smooth(12, 12, 12, 2, 1e300, 1), [12, 12], { bound: 'rel:1e-6', tile: 6, name: 'huge', fill: null })); // 1e300 is data: fill-value guard off
  add('single-cell', pack([42.5], [1, 1], { bound: 'abs:0.1', name: 'one' }));
  // Whole numbers within a bound below half their spacing: the lattice candidate (spec/FORMAT.md 19), an integer centre
  // (centre form 2) and an integer step (step form 3).
  add('integers-f32', pack(Float32Array.from(smooth(12, 12, 16, 2, 50), (v) => Math.round(v)), [12, 12], { bound: 'abs:0.3', tile: 6, name: 'counts' }));
  // An N-D field, (time, y, x) read as a matrix of time x (y, x): the header's nd map (spec/FORMAT.md 6.2.1).
  add('nd-matrix-f32', pack(Float32Array.from(smooth(4, 15, 16)), [4, 15], { bound: 'abs:1e-3', tile: [2, 8], name: 'series', ndShape: [4, 5, 3], dims: ['time', 'y', 'x'], layout: 'matrix:1', attrs: { units: 'm' } }));

  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink, { site: 'fuzz corpus', version: 3 });
  b.add(Float32Array.from(smooth(10, 14, 13)), [10, 14], { bound: 'abs:1e-3', tile: [4, 5], name: 'a' });
  const second = smooth(9, 9, 14, 2, 5);
  holes(second, 4, 1e20);
  b.add(second, [9, 9], { bound: 'rmse:1e-2', tile: 3, name: 'b', fill: 1e20 });
  b.add(new Float64Array(6).fill(-0), [2, 3], { bound: 'abs:1', name: 'c', fill: 0 });
  b.finish();
  add('multi-field', sink.bytes());

  // A field layer (spec/FORMAT.md 6.2.2): 2 slices of 12 x 14 f32 with a fill value, rank 2, factor fields listed first,
  // progressive tiles (the prefix column) on top of it. Made by test/format/layered.ts from the library's tile encoder.
  const { left, right } = smoothFactors(24, 14, 2, 4);
  const lv = Float32Array.from(smooth(24, 14, 17, 2, 3), (v, c) => v + left[2 * Math.floor(c / 14)] * right[2 * (c % 14)]);
  lv[30] = -5;
  add('layered-f32', layeredArchive({ values: lv, shape: [12, 14], slices: 2, tile: [6, 7], tol: 1e-3, fill: -5, rank: 2, left, right, factors: 'before', progressive: true, factorTile: [8, 2] }).bytes);
  return seeds;
}
