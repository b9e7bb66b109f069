/**
 * The benchmark fields: two open datasets shipped by vega-datasets, analytic
 * smooth fields, a synthetic turbulence-like field, two time x space stacks
 * (one of the demo scenario, low rank in time, and one of evolving
 * turbulence, which is not), and one large smooth field for speed. All are float32,
 * row-major, and deterministic.
 */
import { existsSync, readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { corvaneBasin } from '../src/demo/basin.js';
import { fft2 } from './fft.js';
import type { FieldData } from './metrics.js';
import { xorshift32 } from './rng.js';

export interface BenchField extends FieldData {
  id: string;
  /** How it was made, for RESULTS.md. */
  source: string;
  /** Counted among "the smooth fields" of the 1.5x target. */
  smooth: boolean;
  /** The large field timed for the speed targets. */
  large: boolean;
}

/** Find node_modules/vega-datasets/data by walking up from this file (works from bench/ and from its build). */
function datasetDir(): string {
  let dir = dirname(fileURLToPath(import.meta.url));
  for (;;) {
    const candidate = join(dir, 'node_modules', 'vega-datasets', 'data');
    if (existsSync(candidate)) return candidate;
    const up = dirname(dir);
    if (up === dir) throw new Error('node_modules/vega-datasets/data not found above the bench directory; run npm ci');
    dir = up;
  }
}

/** A vega-datasets grid: `width` columns, `height` rows, row-major `values`. */
export function vegaGrid(name: string): { rows: number; cols: number; values: Float32Array } {
  const json = JSON.parse(readFileSync(join(datasetDir(), `${name}.json`), 'utf8')) as { width: number; height: number; values: (number | null)[] };
  const values = Float32Array.from(json.values, (v) => (v === null ? NaN : v));
  if (values.length !== json.width * json.height) throw new Error(`${name}.json: ${values.length} values for ${json.width}x${json.height}`);
  return { rows: json.height, cols: json.width, values };
}

/** Sample f(x, y) on [0,1]^2 at n x n points (x along columns, y along rows). */
function sample(n: number, f: (x: number, y: number) => number): Float32Array {
  const out = new Float32Array(n * n);
  for (let i = 0; i < n; i++) {
    const y = i / (n - 1);
    for (let j = 0; j < n; j++) out[i * n + j] = f(j / (n - 1), y);
  }
  return out;
}

const BUMPS = [
  [0.2, 0.3, 1.0, 0.08],
  [0.7, 0.25, -0.7, 0.12],
  [0.45, 0.6, 0.8, 0.15],
  [0.85, 0.8, 0.5, 0.06],
  [0.3, 0.85, -0.4, 0.1],
  [0.6, 0.45, 0.3, 0.05],
] as const;

/** Gaussian bumps on a tilted plane. */
export function bumps(x: number, y: number): number {
  let v = 2 + 0.5 * x - 0.3 * y;
  for (const [bx, by, a, s] of BUMPS) v += a * Math.exp(-((x - bx) ** 2 + (y - by) ** 2) / (2 * s * s));
  return v;
}

/** Damped radial waves plus a broad oblique wave: smooth, but of high rank. */
export function ripple(x: number, y: number): number {
  const r = Math.hypot(x - 0.4, y - 0.55);
  return Math.cos(14 * r) * Math.exp(-2 * r) + 0.2 * Math.sin(3 * x + 1) * Math.cos(2 * y);
}

/**
 * A curved front (a tanh step across a wavy line) over a gentle background:
 * smooth at the grid scale, nearly rank one away from the front, but of high
 * rank as a whole because the front is not aligned with the grid.
 */
export function front(x: number, y: number): number {
  const d = y - 0.5 - 0.12 * Math.sin(5 * x + 0.5) - 0.05 * Math.cos(11 * x);
  return 1.5 * Math.tanh(d / 0.04) + 0.3 * Math.cos(2 * x + 3 * y) + 0.2 * x;
}

/**
 * Random-phase spectral synthesis of an n x n field whose isotropic energy
 * spectrum falls as E(k) ~ k^-5/3 (Kolmogorov). In 2-D, E(k) ~ k |F(k)|^2,
 * so the Fourier amplitudes fall as k^-4/3 (from memory). Fixed seed; the
 * real part of the inverse transform, scaled to unit standard deviation.
 */
export function turbulence(n: number, seed: number): Float32Array {
  return turbulenceStack(1, n, seed, 0, 0);
}

/**
 * `snapshots` n x n fields of evolving turbulence, laid out time x space
 * (one row per snapshot, the grid flattened along the row): the spectrum
 * of {@link turbulence}, each mode's phase advancing by `turnover` x
 * 2 pi k^(2/3) / 8 a step (a mode of wavenumber k turns over in a time
 * proportional to k^(-2/3) in Kolmogorov scaling, from memory), the whole
 * field drifting `drift` cells a step along the row. Not low rank in time:
 * the small scales decorrelate within a few steps. Each snapshot is scaled
 * like {@link turbulence}'s field (the same mean and deviation for all).
 */
export function turbulenceStack(snapshots: number, n: number, seed: number, turnover: number, drift: number): Float32Array {
  const rand = xorshift32(seed);
  const cells = n * n;
  const amp = new Float64Array(cells);
  const phase0 = new Float64Array(cells);
  const speed = new Float64Array(cells);
  for (let a = 0; a < n; a++) {
    const ky = a <= n / 2 ? a : a - n;
    for (let b = 0; b < n; b++) {
      const kx = b <= n / 2 ? b : b - n;
      const k = Math.hypot(kx, ky);
      phase0[a * n + b] = 2 * Math.PI * rand();
      if (k === 0) continue;
      amp[a * n + b] = k ** (-4 / 3);
      speed[a * n + b] = (turnover * 2 * Math.PI * k ** (2 / 3)) / 8 - (2 * Math.PI * kx * drift) / n;
    }
  }
  const raw = new Float64Array(snapshots * cells);
  const re = new Float64Array(cells);
  const im = new Float64Array(cells);
  for (let t = 0; t < snapshots; t++) {
    for (let c = 0; c < cells; c++) {
      const p = phase0[c] + speed[c] * t;
      re[c] = amp[c] * Math.cos(p);
      im[c] = amp[c] * Math.sin(p);
    }
    fft2(re, im, n, true);
    raw.set(re, t * cells);
  }
  let sum = 0;
  let sq = 0;
  for (let i = 0; i < raw.length; i++) {
    sum += raw[i];
    sq += raw[i] * raw[i];
  }
  const mean = sum / raw.length;
  const sd = Math.sqrt(sq / raw.length - mean * mean);
  return Float32Array.from(raw, (v) => (v - mean) / sd);
}

/**
 * T snapshots of the demo's Corvane Basin laid out time x space (one row per
 * snapshot, the grid flattened along the row). The basin generator has no
 * time axis, so each snapshot blends six seeds of it with smoothly varying,
 * nonlinear weights (eddies fading in and out), adds a seasonal cycle of
 * 1.5 degC and independent sensor-like noise of +-0.005 degC. Land stays the
 * fill value -999 in every snapshot.
 */
export function basinStack(snapshots: number, rows: number, cols: number): { values: Float32Array; fill: number } {
  const seeds = [7301, 7302, 7303, 7304, 7305, 7306];
  const maps = seeds.map((seed) => corvaneBasin({ rows, cols, seed }));
  const fill = maps[0].fill ?? -999;
  const cells = rows * cols;
  const out = new Float32Array(snapshots * cells);
  const rand = xorshift32(99);
  for (let t = 0; t < snapshots; t++) {
    const phase = (2 * Math.PI * t) / snapshots;
    const raw = seeds.map((_, k) => Math.exp(2 * Math.cos(phase * (1 + 0.3 * k) - (2 * Math.PI * k) / seeds.length)));
    const total = raw.reduce((a, b) => a + b, 0);
    const w = raw.map((v) => v / total);
    const season = 1.5 * Math.sin(phase);
    for (let c = 0; c < cells; c++) {
      const land = maps[0].values[c] === fill;
      let v = 0;
      if (!land) {
        for (let k = 0; k < maps.length; k++) v += w[k] * maps[k].values[c];
        v += season + 0.01 * (rand() - 0.5);
      }
      out[t * cells + c] = land ? fill : v;
    }
  }
  return { values: out, fill };
}

/** The fields of a run; `quick` shrinks the generated ones. */
export function benchFields(quick: boolean): BenchField[] {
  const n = quick ? 256 : 512;
  const big = quick ? 1024 : 4096;
  const [sr, sc, st] = quick ? [32, 48, 48] : [64, 96, 128];
  const [tn, tt] = quick ? [64, 16] : [128, 32];
  const volcano = vegaGrid('volcano');
  const precip = vegaGrid('annual-precip');
  const stack = basinStack(st, sr, sc);
  const plain = { fill: null, smooth: false, large: false };
  return [
    { id: 'volcano', ...plain, ...volcano, source: 'vega-datasets data/volcano.json (Maunga Whau heights, 87 wide x 61 high)' },
    { id: 'annual-precip', ...plain, ...precip, source: 'vega-datasets data/annual-precip.json (360 wide x 168 high)' },
    { id: 'smooth-bumps', ...plain, smooth: true, rows: n, cols: n, values: sample(n, bumps), source: `analytic: six Gaussian bumps on a tilted plane, ${n}x${n}` },
    { id: 'smooth-ripple', ...plain, smooth: true, rows: n, cols: n, values: sample(n, ripple), source: `analytic: damped radial waves plus an oblique wave, ${n}x${n}` },
    { id: 'smooth-front', ...plain, smooth: true, rows: n, cols: n, values: sample(n, front), source: `analytic: a curved tanh front (width 0.04) over a gentle background, ${n}x${n}` },
    { id: 'turbulence', ...plain, rows: n, cols: n, values: turbulence(n, 1941), source: `random-phase spectral synthesis, E(k) ~ k^-5/3, seed 1941, ${n}x${n}` },
    { id: 'basin-stack', ...plain, fill: stack.fill, rows: st, cols: sr * sc, values: stack.values, stack: [sr, sc], source: `${st} snapshots (rows) of the demo's ${sr}x${sc} Corvane Basin (columns), six seeds blended over time, seasonal cycle, noise; land = fill -999` },
    {
      id: 'turbulence-stack',
      ...plain,
      rows: tt,
      cols: tn * tn,
      values: turbulenceStack(tt, tn, 1953, 0.05, 0.3),
      stack: [tn, tn],
      source: `${tt} snapshots (rows) of ${tn}x${tn} evolving turbulence (columns): the turbulence spectrum with seed 1953, each mode turning over at a rate ~ k^(2/3), drifting 0.3 cells a step; not low rank in time`,
    },
    {
      id: 'large',
      ...plain,
      smooth: true,
      large: true,
      rows: big,
      cols: big,
      values: sample(big, (x, y) => bumps(x, y) + 0.25 * ripple(x, y)),
      source: `analytic: bumps + 0.25 ripple, ${big}x${big}${quick ? ' (quick run: 4096x4096 shrunk to 1024x1024)' : ''}`,
    },
  ];
}
