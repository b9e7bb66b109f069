/**
 * Edge cases of the codec: constant fields, bounds finer than the float
 * precision, magnitudes near the float limits and across many decades,
 * degenerate shapes and tiles, and determinism.
 *
 * Float facts used (IEEE 754, from memory): binary64 spacing at 1 is 2^-52
 * (about 2.2e-16), largest finite about 1.798e308; binary32 spacing at 1 is
 * 2^-23 (about 1.2e-7), largest finite about 3.403e38.
 */
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { pack } from '../../src/pack.js';
import type { Dtype, FloatArray } from '../../src/types.js';
import { asDtype, close, expectIndexMatches, measure, prng, words } from './measure.js';

const MODES = ['rel:1e-3', 'abs:1e-2', 'rmse:1e-2', 'psnr:40'];

/** A smooth field with a little noise, values about 1 (row-major). */
function field(rows: number, cols: number, seed = 1): Float64Array {
  const rnd = prng(seed);
  const v = new Float64Array(rows * cols);
  for (let i = 0; i < rows; i++) {
    for (let j = 0; j < cols; j++) v[i * cols + j] = 1 + 0.5 * Math.sin(i / 4 + 0.3) * Math.cos(j / 6) + 0.2 * Math.cos(i / 7) + 1e-3 * rnd();
  }
  return v;
}

function sameBits(a: FloatArray, b: FloatArray): boolean {
  const x = words(a);
  const y = words(b);
  return x.length === y.length && x.every((w, i) => w === y[i]);
}

/** Pack, read and check one field; returns the archive and decoded values after asserting the bound. */
async function roundTrip(values: FloatArray, shape: number[], bound: string, tile?: number | [number, number]) {
  const dtype: Dtype = values instanceof Float32Array ? 'f32' : 'f64';
  // Extreme values are data here: the fill-value guard (pack's fill option) is off.
  const bytes = pack(values, shape, { bound, tile, fill: null });
  const archive = await open(bytes);
  const h = archive.header.fields[0];
  const got = (await archive.read()).values;
  const m = measure(values, got, shape, h.tile, dtype, null);
  expect(m.nonFinite).toBe(0);
  if (bound.startsWith('abs') || bound.startsWith('rel')) {
    for (let c = 0; c < values.length; c++) {
      const d = Math.abs(values[c] - got[c]);
      if (!(d <= h.bound.tolerance)) expect.fail(`cell ${c}: |${values[c]} - ${got[c]}| = ${d} > ${h.bound.tolerance}`);
    }
  } else expect(m.summary.rmse).toBeLessThanOrEqual(h.bound.tolerance);
  await expectIndexMatches(archive, m);
  expect((await archive.check(values)).ok).toBe(true);
  return { archive, got, bytes, m };
}

describe('constant fields', () => {
  for (const dtype of ['f32', 'f64'] as const) {
    for (const bound of MODES) {
      it(`${dtype} ${bound}: values exact, ratio large`, async () => {
        const values = asDtype(new Array(64 * 64).fill(3.7), dtype);
        const { got, bytes, archive } = await roundTrip(values, [64, 64], bound);
        expect(sameBits(values, got)).toBe(true);
        // 64x64 values are 16 or 32 KiB; the archive is a few hundred bytes of which most is header.
        expect(values.byteLength / bytes.length).toBeGreaterThan(dtype === 'f32' ? 25 : 50);
        expect((await archive.loadIndex()).fields[0].summary.max_err).toBe(0);
        if (bound.startsWith('rel') || bound.startsWith('psnr')) expect(archive.header.fields[0].bound.tolerance).toBe(0);
      });
    }
  }

  it('a constant field at a magnitude of 1e300 stays exact', async () => {
    const values = new Float64Array(30 * 30).fill(-1.2345e300);
    const { got } = await roundTrip(values, [30, 30], 'rel:1e-2', 16);
    expect(sameBits(values, got)).toBe(true);
  });
});

describe('bounds finer than the float precision force exact storage', () => {
  it('abs:1e-300 on f64 values of magnitude 1', async () => {
    const values = field(40, 50);
    const { got, archive } = await roundTrip(values, [40, 50], 'abs:1e-300', 16);
    // No binary64 value other than x itself lies within 1e-300 of an x near 1.
    expect(sameBits(values, got)).toBe(true);
    expect((await archive.loadIndex()).fields[0].summary.max_err).toBe(0);
  });

  it('abs:1e-12 on f32 values of magnitude 1', async () => {
    const values = Float32Array.from(field(40, 50));
    const { got, archive } = await roundTrip(values, [40, 50], 'abs:1e-12', 16);
    expect(sameBits(values, got)).toBe(true);
    expect((await archive.loadIndex()).fields[0].summary.max_err).toBe(0);
  });

  it('rel:1e-20 on f64 values of magnitude 1', async () => {
    const values = field(33, 21);
    expect(sameBits(values, (await roundTrip(values, [33, 21], 'rel:1e-20', 10)).got)).toBe(true);
  });

  it('rmse:1e-150 on f64 values of magnitude 1', async () => {
    const values = field(33, 21);
    expect(sameBits(values, (await roundTrip(values, [33, 21], 'rmse:1e-150', 10)).got)).toBe(true);
  });

  // Found against commit 74b919b: an L2 bound whose square underflows (E below about
  // 1e-162) made the squared-error budget N * E^2 zero, the factor step target 0, and
  // pack() threw RangeError('step target must be positive').
  for (const bound of ['rmse:1e-300', 'rmse:1e-200', 'psnr:3300']) {
    it(`${bound} on f64 values of magnitude 1`, async () => {
      const values = field(33, 21);
      expect(sameBits(values, (await roundTrip(values, [33, 21], bound, 10)).got)).toBe(true);
    });
  }
});

describe('magnitudes near the float limits', () => {
  it('f32 values near 3e38 (binary32 maximum about 3.4e38)', async () => {
    const base = field(24, 30);
    const values = Float32Array.from(base, (v, i) => (i % 2 ? -1 : 1) * 2e38 * v * 0.75); // |v| <= 1.7 -> |x| <= 2.6e38
    for (const bound of MODES) await roundTrip(values, [24, 30], bound, 12);
    const near = Float32Array.from(base, (v) => 3e38 + 1e37 * (v - 1)); // 2.9e38 .. 3.1e38
    for (const bound of [...MODES, 'abs:1e30']) await roundTrip(near, [24, 30], bound, 12);
  });

  // Found against commit 74b919b: pack() threw RangeError('step target must be positive')
  // once a tile's squared Frobenius norm overflowed binary64 (|x| above about 1.3e154):
  // the factor step target FACTOR_NOISE * e * sqrt(12 n / energy) became 0.
  for (const bound of MODES) {
    it(`f64 values near 1e308, ${bound}`, async () => {
      const values = field(24, 30).map((v) => 1e308 * (v - 0.9)); // -1.6e307 .. 1e308
      await roundTrip(values, [24, 30], bound, 12);
    });
  }

  it('a 1x2 field [0, 2e154] packs (smallest reproduction of the overflow)', () => {
    expect(() => pack(new Float64Array([0, 2e154]), [1, 2], { bound: 'rel:1e-3', fill: null })).not.toThrow();
  });

  it('f64 values of magnitude 1e150 (squares still finite) round-trip', async () => {
    const values = field(24, 30).map((v) => 1e150 * v);
    for (const bound of MODES) await roundTrip(values, [24, 30], bound, 12);
  });

  // Found against commit 74b919b: per-tile and summary RMSE were sqrt(sum d^2 / n) with
  // no scaling, so errors below about 1e-162 squared to 0 and the index recorded RMSE 0.
  it('f64 values of magnitude 1e-300: the recorded RMSE is the true one', async () => {
    const values = field(20, 20).map((v) => 1e-300 * v);
    await roundTrip(values, [20, 20], 'abs:1e-303', 10);
  });

  it('f64 values of magnitude 1e-300 meet a pointwise bound', async () => {
    const values = field(20, 20).map((v) => 1e-300 * v);
    const archive = await open(pack(values, [20, 20], { bound: 'abs:1e-303', tile: 10 }));
    const got = (await archive.read()).values;
    for (let c = 0; c < values.length; c++) expect(Math.abs(values[c] - got[c])).toBeLessThanOrEqual(1e-303);
  });
});

describe('tiles spanning many decades', () => {
  /** Values 10^-30 .. 10^30 spread over the tile, alternating in sign. */
  function decades(rows: number, cols: number): Float64Array {
    const v = new Float64Array(rows * cols);
    for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) v[i * cols + j] = (j % 3 ? 1 : -1) * 10 ** (-30 + (60 * (i * cols + j)) / (rows * cols - 1));
    return v;
  }

  for (const dtype of ['f32', 'f64'] as const) {
    for (const bound of ['abs:1e-35', 'abs:1e20', 'rel:1e-6', 'rmse:1e25', 'psnr:60']) {
      it(`${dtype} ${bound}`, async () => {
        const values = asDtype(decades(16, 20), dtype);
        const { got } = await roundTrip(values, [16, 20], bound, 16);
        if (bound === 'abs:1e-35') expect(sameBits(values, got)).toBe(true); // finer than every value's spacing
      });
    }
  }
});

describe('degenerate shapes and tiles', () => {
  const shapes: [number, number][] = [
    [1, 1],
    [1, 2],
    [1, 97],
    [97, 1],
    [2, 1],
    [3, 5],
  ];
  for (const [rows, cols] of shapes) {
    for (const dtype of ['f32', 'f64'] as const) {
      for (const bound of MODES) {
        for (const tile of [1, 7, 1000] as const) {
          it(`${rows}x${cols} ${dtype} ${bound} tile ${tile}`, async () => {
            const values = asDtype(field(rows, cols, rows * 100 + cols), dtype);
            const { archive } = await roundTrip(values, [rows, cols], bound, tile);
            const tiles = Math.ceil(rows / tile) * Math.ceil(cols / tile);
            expect((await archive.loadIndex()).fields[0].offset.length).toBe(tiles);
            expect(archive.header.fields[0].shape).toEqual([rows, cols]);
          });
        }
      }
    }
  }

  it('a tile larger than the field in one direction only', async () => {
    const values = field(10, 70);
    const { archive } = await roundTrip(values, [10, 70], 'rel:1e-4', [64, 8]);
    expect((await archive.loadIndex()).fields[0].offset.length).toBe(9);
  });

  it('a 1x1 field of a single value is exact at rel (range 0)', async () => {
    const values = new Float64Array([Math.PI]);
    const { got, archive } = await roundTrip(values, [1, 1], 'rel:1e-3');
    expect(archive.header.fields[0].bound.tolerance).toBe(0);
    expect(sameBits(values, got)).toBe(true);
  });
});

describe('determinism', () => {
  for (const dtype of ['f32', 'f64'] as const) {
    for (const bound of [...MODES, 'abs:1e-6']) {
      it(`${dtype} ${bound}: the same input packs to byte-identical archives`, () => {
        const base = field(50, 70, 7);
        const a = pack(asDtype(base, dtype), [50, 70], { bound, tile: [16, 24] });
        const b = pack(asDtype(base.slice(), dtype), [50, 70], { bound, tile: [16, 24] });
        expect(b.length).toBe(a.length);
        expect(Buffer.from(a).equals(Buffer.from(b))).toBe(true);
      });
    }
  }

  it('packing does not modify its input', () => {
    const values = field(20, 30);
    values[5] = NaN;
    const copy = values.slice();
    pack(values, [20, 30], { bound: 'rmse:1e-3', tile: 8, fill: -999 });
    expect(sameBits(values, copy)).toBe(true);
  });

  it('the index records tolerance-consistent figures for every mode', async () => {
    // A cross-check of the header against the definitions (rel: R * range; psnr: range / 10^(D/20)).
    const values = field(30, 30);
    let lo = Infinity;
    let hi = -Infinity;
    for (const v of values) {
      lo = Math.min(lo, v);
      hi = Math.max(hi, v);
    }
    const rel = await open(pack(values, [30, 30], { bound: 'rel:1e-3' }));
    expect(rel.header.fields[0].bound.tolerance).toBe(1e-3 * (hi - lo));
    const psnr = await open(pack(values, [30, 30], { bound: 'psnr:60' }));
    expect(close(psnr.header.fields[0].bound.tolerance, (hi - lo) / 1000)).toBe(true);
  });
});
