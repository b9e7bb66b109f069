/**
 * The instrument around the baselines: cells are marked failed whenever the
 * decoded values break the bound, rankfield's bytes split into parts that
 * add up, the metrics follow their definitions, the generated fields are
 * what they claim, and the plotter draws a decodable PNG.
 */
import { decode } from 'fast-png';
import { describe, expect, it } from 'vitest';
import { pack } from '../../src/index.js';
import { BaselineFailure } from '../../bench/baselines/bytes.js';
import type { Codec } from '../../bench/baselines/codec.js';
import { runCodec } from '../../bench/cells.js';
import { fft, fft2 } from '../../bench/fft.js';
import { basinStack, turbulence, vegaGrid } from '../../bench/fields.js';
import { glyph } from '../../src/picture/font.js';
import { measure, type Target } from '../../bench/metrics.js';
import { renderPlot, ticks, tickLabel } from '../../bench/plot.js';
import { breakdown, rankfield } from '../../bench/rankfield.js';

const FAST = { iterations: 1, timeMs: 0, slowMs: 0, minRuns: 1 };

function ramp(rows: number, cols: number): Float32Array {
  return Float32Array.from({ length: rows * cols }, (_, c) => Math.floor(c / cols) * 0.1 + (c % cols) * 0.05);
}

describe('cells', () => {
  const field = { id: 'ramp', values: ramp(8, 9), rows: 8, cols: 9, fill: null };
  const t: Target = { text: 'rel:1e-2', mode: 'rel', value: 1e-2, tol: 0.01, pointwise: true, range: 1.1 };
  const offBy = (delta: number): Codec => ({
    id: 'offset',
    describe: 'adds a constant',
    encode: (f) => new Uint8Array(f.values.buffer.slice(0)),
    decode: (b) => new Float32Array(b.buffer.slice(0)).map((v, c) => (c === 7 ? v + delta : v)),
  });

  it('marks a row failed when one decoded value breaks a pointwise bound', async () => {
    const { row } = await runCodec(offBy(0.0101), field, t, FAST);
    expect(row.status).toBe('failed');
    expect(row.reason).toMatch(/max error/);
    expect(row.maxOverE).toBeGreaterThan(1);
  });

  it('keeps a row ok at an error just inside the bound', async () => {
    const { row } = await runCodec(offBy(0.0099), field, t, FAST);
    expect(row.status).toBe('ok');
    expect(row.ratio).toBeCloseTo(1, 10);
  });

  it('marks a row failed when the encoder gives up, with its reason', async () => {
    const giving: Codec = { id: 'x', describe: '', encode: () => { throw new BaselineFailure('cannot'); }, decode: () => new Float32Array(0) };
    const { row } = await runCodec(giving, field, t, FAST);
    expect(row).toMatchObject({ status: 'failed', reason: 'encode cannot' });
  });

  it('marks a row failed when a missing cell does not come back bit for bit', async () => {
    const values = ramp(8, 9);
    values[3] = NaN;
    const nanField = { ...field, values };
    const quiet: Codec = { ...offBy(0), decode: (b) => new Float32Array(b.buffer.slice(0)).map((v) => (Number.isNaN(v) ? 0 : v)) };
    const { row } = await runCodec(quiet, nanField, t, FAST);
    expect(row.status).toBe('failed');
    expect(row.reason).toMatch(/missing cells/);
  });
});

describe('rankfield bytes', () => {
  it('split into factors, residual and metadata that add up to the archive', async () => {
    const rows = 70;
    const cols = 90;
    const values = Float32Array.from({ length: rows * cols }, (_, c) => Math.sin(Math.floor(c / cols) / 9) * Math.cos((c % cols) / 13));
    values[5] = -999;
    for (const bound of ['rel:1e-3', 'psnr:60']) {
      const bytes = pack(values, [rows, cols], { bound, tile: 64, fill: -999 });
      const b = await breakdown(bytes);
      expect(b.tiles).toBe(4);
      expect(b.factors + b.residual + b.metadata).toBe(bytes.length);
      expect(b.metadata).toBeGreaterThan(0);
      // The frame holds at least the 12-byte prologue and the 24-byte tail (spec/FORMAT.md, section 3); the per-tile part adds the payloads' framing to the rest.
      expect(b.container).toBeGreaterThan(36);
      expect(b.tileMetadata).toBeGreaterThanOrEqual(b.metadata - b.container);
      expect(b.tileMetadata + b.container).toBeLessThan(bytes.length);
      const back = await rankfield.decode(bytes);
      expect(back.length).toBe(rows * cols);
    }
  });
});

describe('metrics', () => {
  it('computes RMSE and PSNR = 20 log10(range / RMSE)', () => {
    // PSNR definition (common usage, from memory).
    const e = measure(Float32Array.from([0, 1, 2, 3]), Float32Array.from([0, 1, 2, 4]), null, 3);
    expect(e.maxErr).toBe(1);
    expect(e.rmse).toBeCloseTo(0.5, 12);
    expect(e.psnr).toBeCloseTo(20 * Math.log10(6), 12);
  });
});

describe('fields', () => {
  it('reads the vega-datasets grids with their published sizes', () => {
    // vega-datasets: volcano.json is 87 wide x 61 high, annual-precip.json 360 wide x 168 high (RULES.md, the package's data).
    expect(vegaGrid('volcano')).toMatchObject({ rows: 61, cols: 87 });
    expect(vegaGrid('annual-precip')).toMatchObject({ rows: 168, cols: 360 });
  });

  it('synthesizes turbulence whose energy spectrum falls as k^-5/3', () => {
    // Kolmogorov: E(k) ~ k^-5/3; in 2-D the power per mode is E(k) / k ~ k^-8/3 (from memory).
    const n = 128;
    const f = turbulence(n, 3);
    const re = Float64Array.from(f);
    const im = new Float64Array(n * n);
    fft2(re, im, n);
    const shells = new Float64Array(n);
    const count = new Float64Array(n);
    for (let a = 0; a < n; a++) for (let b = 0; b < n; b++) {
      const k = Math.round(Math.hypot(a <= n / 2 ? a : a - n, b <= n / 2 ? b : b - n));
      shells[k] += re[a * n + b] ** 2 + im[a * n + b] ** 2;
      count[k]++;
    }
    const xs: number[] = [];
    const ys: number[] = [];
    for (let k = 4; k <= 40; k++) {
      xs.push(Math.log(k));
      ys.push(Math.log(shells[k] / count[k]));
    }
    const mx = xs.reduce((s, v) => s + v, 0) / xs.length;
    const my = ys.reduce((s, v) => s + v, 0) / ys.length;
    const slope = xs.reduce((s, x, i) => s + (x - mx) * (ys[i] - my), 0) / xs.reduce((s, x) => s + (x - mx) ** 2, 0);
    expect(slope).toBeGreaterThan(-8 / 3 - 0.2);
    expect(slope).toBeLessThan(-8 / 3 + 0.2);
  });

  it('lays the basin stack out time x space with land as fill in every snapshot', () => {
    const { values, fill } = basinStack(4, 16, 24);
    expect(values.length).toBe(4 * 16 * 24);
    for (let c = 0; c < 16 * 24; c++) {
      const land = values[c] === fill;
      for (let t = 1; t < 4; t++) expect(values[t * 16 * 24 + c] === fill).toBe(land);
    }
  });
});

describe('fft', () => {
  it('transforms a unit impulse to all ones and back', () => {
    // DFT definition: the transform of delta[0] is 1 at every frequency (from memory).
    const re = new Float64Array(8);
    const im = new Float64Array(8);
    re[0] = 1;
    fft(re, im);
    expect(Array.from(re)).toEqual(Array(8).fill(1));
    fft(re, im, true);
    expect(re[0]).toBeCloseTo(1, 14);
    expect(re[3]).toBeCloseTo(0, 14);
  });
});

describe('plot', () => {
  it('chooses 1-2-5 ticks on a log axis of two decades', () => {
    expect(ticks(1, 100, true)).toEqual([1, 2, 5, 10, 20, 50, 100]);
    expect(tickLabel(0.05)).toBe('0.05');
    expect(tickLabel(1e-5)).toBe('1e-5');
  });

  it('draws a PNG of the requested size with the series colour on it', () => {
    const png = renderPlot({
      title: 'test',
      width: 400,
      height: 300,
      x: { label: 'x', log: true },
      y: { label: 'y' },
      series: [{ name: 'a', points: [[1, 1], [10, 2]], color: [200, 10, 10] }],
    });
    const img = decode(png);
    expect([img.width, img.height, img.channels]).toEqual([400, 300, 3]);
    let red = 0;
    for (let p = 0; p < img.width * img.height; p++) if (img.data[p * 3] === 200 && img.data[p * 3 + 1] === 10) red++;
    expect(red).toBeGreaterThan(50);
  });

  it('has 5-wide glyphs of 7 rows, 9 with a descender', () => {
    for (const ch of '0123456789abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ.:-()') {
      expect([35, 45]).toContain(glyph(ch).length);
    }
    expect(glyph('g').length).toBe(45);
  });
});
