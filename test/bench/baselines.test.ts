/**
 * Round trips of the benchmark baselines on small inputs: each meets the
 * bound it was given (checked on the decoded values, as the harness does),
 * restores missing cells bit for bit, and the lossless one is exact.
 */
import { Matrix, SingularValueDecomposition } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { BaselineFailure, packInts, unpackInts } from '../../bench/baselines/bytes.js';
import type { Codec } from '../../bench/baselines/codec.js';
import { columnSubset, spacedColumns } from '../../bench/baselines/column-subset.js';
import { deflateRaw } from '../../bench/baselines/deflate.js';
import { globalSvd } from '../../bench/baselines/global-svd.js';
import { lorenzo, lorenzoPredictor } from '../../bench/baselines/lorenzo.js';
import { lorenzo3d, lorenzo3dPredictor } from '../../bench/baselines/lorenzo-3d.js';
import { oracleValues, tileSpectra } from '../../bench/baselines/oracle.js';
import { quantize } from '../../bench/baselines/quantize.js';
import { measure, validRange, type FieldData, type Target } from '../../bench/metrics.js';
import { xorshift32 } from '../../bench/rng.js';

/** A smooth 30x41 field with a little seeded noise. */
function smallField(fill: number | null = null): FieldData {
  const rows = 30;
  const cols = 41;
  const rand = xorshift32(5);
  const values = new Float32Array(rows * cols);
  for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) values[i * cols + j] = 10 + Math.sin(i / 5) * Math.cos(j / 7) + 0.3 * (i / rows) + 0.01 * rand();
  if (fill !== null) {
    for (const c of [0, 5, 77, 400, 401, 402, 1229]) values[c] = fill;
    values[900] = NaN;
  }
  return { values, rows, cols, fill };
}

/** The bound as the harness resolves it: rel -> value x range (pointwise), psnr -> range / 10^(dB/20) (RMSE). */
function target(field: FieldData, text: string): Target {
  const [lo, hi] = validRange(field.values, field.fill);
  const [mode, v] = text.split(':');
  const value = Number(v);
  const range = hi - lo;
  if (mode === 'rel') return { text, mode: 'rel', value, tol: value * range, pointwise: true, range };
  return { text, mode: 'psnr', value, tol: range / 10 ** (value / 20), pointwise: false, range };
}

async function roundTrip(codec: Codec, field: FieldData, t: Target) {
  const bytes = codec.encode(field, t);
  const decoded = await codec.decode(bytes);
  return { bytes, decoded, errors: measure(field.values, decoded, field.fill, t.range) };
}

const LOSSY: Codec[] = [quantize, lorenzo, globalSvd, columnSubset];

describe('deflate baseline', () => {
  it('is lossless: every word comes back, NaN and fill included', async () => {
    const field = smallField(-999);
    const { decoded } = await roundTrip(deflateRaw, field, target(field, 'rel:1e-3'));
    expect(Array.from(new Uint32Array(decoded.buffer, decoded.byteOffset, decoded.length))).toEqual(Array.from(new Uint32Array(field.values.buffer)));
  });
});

describe.each(LOSSY.map((c) => [c.id, c] as const))('%s baseline', (_id, codec) => {
  for (const bound of ['rel:1e-2', 'rel:1e-4']) {
    it(`keeps every valid value within E at ${bound}, missing cells bit for bit`, async () => {
      const field = smallField(-999);
      const t = target(field, bound);
      const { errors } = await roundTrip(codec, field, t);
      // Pointwise bound: |x - x'| <= E for every valid cell (the definition of the bound).
      expect(errors.maxErr).toBeLessThanOrEqual(t.tol);
      expect(errors.mismatches).toBe(0);
      expect(errors.valid).toBe(field.values.length - 8);
    });
  }
  for (const bound of ['psnr:40', 'psnr:70']) {
    it(`meets the RMSE limit of ${bound}`, async () => {
      const field = smallField();
      const t = target(field, bound);
      const { errors } = await roundTrip(codec, field, t);
      // PSNR = 20 log10(range / RMSE) (common definition, from memory), so RMSE <= range / 10^(dB/20).
      expect(errors.rmse).toBeLessThanOrEqual(t.tol);
      expect(errors.psnr).toBeGreaterThanOrEqual(t.value);
    });
  }
});

describe('quantize and lorenzo', () => {
  it('leave the same error (integer prediction is exact) and lorenzo is smaller on a smooth field', async () => {
    const field = smallField();
    const t = target(field, 'rel:1e-3');
    const a = await roundTrip(quantize, field, t);
    const b = await roundTrip(lorenzo, field, t);
    expect(Array.from(b.decoded)).toEqual(Array.from(a.decoded));
    expect(b.bytes.length).toBeLessThan(a.bytes.length);
  });

  it('quantize uses half-step rounding: the max error is close to E, not far below it', async () => {
    const field = smallField();
    const t = target(field, 'rel:1e-3');
    const { errors } = await roundTrip(quantize, field, t);
    // Uniform quantization with step 2E rounds to the nearest multiple, so errors spread over [0, E] (from memory).
    expect(errors.maxErr).toBeGreaterThan(0.9 * t.tol);
  });

  it('refuses a bound below float32 resolution instead of silently breaking it', () => {
    const field = smallField();
    const t: Target = { text: 'abs:1e-9', mode: 'abs', value: 1e-9, tol: 1e-9, pointwise: true, range: 1 };
    // float32 spacing at 10 is 2^-20 (about 9.5e-7), from memory: no rounding to float32 can keep 1e-9.
    expect(() => quantize.encode(field, t)).toThrow(BaselineFailure);
  });
});

describe('Lorenzo predictor', () => {
  it('predicts a linear function exactly away from the first row and column', () => {
    // Ibarria et al. 2003 (from memory): the n-D Lorenzo predictor reproduces polynomials of degree below n; in 2-D, linear ones.
    const rows = 6;
    const cols = 7;
    const q = new Int32Array(rows * cols);
    for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) q[i * cols + j] = 3 * i - 5 * j + 11;
    const d = lorenzoPredictor.forward(q, rows, cols);
    for (let i = 1; i < rows; i++) for (let j = 1; j < cols; j++) expect(d[i * cols + j]).toBe(0);
    expect(Array.from(lorenzoPredictor.inverse(d, rows, cols))).toEqual(Array.from(q));
  });

  it('leaves the constant d on a bilinear a + b i + c j + d ij', () => {
    // Worked by hand: f(i-1,j) + f(i,j-1) - f(i-1,j-1) = a + b i + c j + d (ij - 1).
    const rows = 5;
    const cols = 5;
    const q = new Int32Array(rows * cols);
    for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) q[i * cols + j] = 2 + i + 4 * j + 3 * i * j;
    const d = lorenzoPredictor.forward(q, rows, cols);
    for (let i = 1; i < rows; i++) for (let j = 1; j < cols; j++) expect(d[i * cols + j]).toBe(3);
  });
});

describe('3-D Lorenzo baseline (time x space stacks)', () => {
  it('leaves the mixed third difference: 0 for sums of terms missing an axis, the constant c on c t i j', () => {
    // Worked by hand: the 3-D Lorenzo residual is the mixed difference D_t D_i D_j q (Ibarria et al. 2003, from memory),
    // which vanishes on any term independent of t, i or j (every term of degree <= 2) and is c on c t i j.
    const [snapshots, gridRows, gridCols] = [4, 5, 6];
    const cols = gridRows * gridCols;
    const q = new Int32Array(snapshots * cols);
    for (let t = 0; t < snapshots; t++) for (let i = 0; i < gridRows; i++) for (let j = 0; j < gridCols; j++) q[t * cols + i * gridCols + j] = 7 + 2 * t - i + 3 * j + t * i - 2 * i * j + t * j + t * t + 4 * t * i * j;
    const p = lorenzo3dPredictor(gridRows, gridCols);
    const d = p.forward(q, snapshots, cols);
    for (let t = 1; t < snapshots; t++) for (let i = 1; i < gridRows; i++) for (let j = 1; j < gridCols; j++) expect(d[t * cols + i * gridCols + j]).toBe(4);
    expect(Array.from(p.inverse(d, snapshots, cols))).toEqual(Array.from(q));
  });

  it('applies to stacks only, and keeps a pointwise bound and the missing cells on one', async () => {
    const base = smallField(-999);
    expect(lorenzo3d.appliesTo?.(base)).toBe(false);
    // The 30 x 41 field's first 30 x 40 cells as 30 snapshots of a 5 x 8 grid.
    const cols = 40;
    const values = new Float32Array(30 * cols);
    for (let r = 0; r < 30; r++) values.set(base.values.subarray(r * 41, r * 41 + cols), r * cols);
    const field: FieldData = { values, rows: 30, cols, fill: -999, stack: [5, 8] };
    expect(lorenzo3d.appliesTo?.(field)).toBe(true);
    const t = target(field, 'rel:1e-3');
    const { errors } = await roundTrip(lorenzo3d, field, t);
    // Pointwise bound: |x - x'| <= E for every valid cell (the definition of the bound).
    expect(errors.maxErr).toBeLessThanOrEqual(t.tol);
    expect(errors.mismatches).toBe(0);
  });
});

describe('integer packing', () => {
  it('round-trips signed integers at each width', () => {
    for (const v of [[0, -1, 1, 127, -128], [300, -300, 0], [70000, -70000, 1 << 29]]) {
      expect(Array.from(unpackInts(packInts(v), v.length))).toEqual(v);
    }
  });
});

describe('global SVD baseline', () => {
  it('stores an exactly rank-2 field in far fewer bytes than plain quantization', async () => {
    const rows = 48;
    const cols = 40;
    const values = new Float32Array(rows * cols);
    for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) values[i * cols + j] = Math.sin(i / 4) * Math.cos(j / 9) + (i / rows) * (j / cols);
    const field = { values, rows, cols, fill: null };
    const t = target(field, 'psnr:60');
    const svd = await roundTrip(globalSvd, field, t);
    const q = await roundTrip(quantize, field, t);
    expect(svd.errors.rmse).toBeLessThanOrEqual(t.tol);
    // Eckart-Young: a rank-2 matrix is reproduced by two singular triplets, 2 (m + n) values against m n.
    expect(svd.bytes.length).toBeLessThan(q.bytes.length / 2);
  });
});

describe('column-subset baseline', () => {
  it('needs only 3 columns for a field whose columns span a 3-dimensional space', async () => {
    const rows = 20;
    const cols = 30;
    const values = new Float32Array(rows * cols);
    for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) values[i * cols + j] = 1 + (i * j) / 30 + Math.sin(i) * Math.cos(j);
    const field = { values, rows, cols, fill: null };
    const t = target(field, 'psnr:80');
    const { bytes, errors } = await roundTrip(columnSubset, field, t);
    expect(errors.rmse).toBeLessThanOrEqual(t.tol);
    // Stream: rows u32, cols u32, missing count u32 (0), then k u32. Column j is 1 + (j/30) i + cos(j) sin(i): all lie in
    // span{1, i, sin i} (linear algebra), and the kept columns 5, 15, 25 have independent coefficients, so k = 3 suffices.
    const k = new DataView(bytes.buffer, bytes.byteOffset).getUint32(12, true);
    expect(k).toBe(3);
  });

  it('spaces columns evenly', () => {
    expect(spacedColumns(10, 2)).toEqual([2, 7]);
    expect(spacedColumns(5, 5)).toEqual([0, 1, 2, 3, 4]);
  });
});

describe('Eckart-Young floor', () => {
  it('counts r (m + n) per tile from singular values that agree with ml-matrix', () => {
    const rows = 64;
    const cols = 64;
    const rand = xorshift32(11);
    const a = new Float64Array(rows * cols).map(() => rand() - 0.5);
    const [tile] = tileSpectra(a, rows, cols, 64);
    // Reference library: ml-matrix's SVD.
    const ref = new SingularValueDecomposition(new Matrix(Array.from({ length: rows }, (_, i) => Array.from(a.subarray(i * cols, (i + 1) * cols))))).diagonal;
    for (let k = 0; k < 64; k++) expect(tile.s[k]).toBeCloseTo(ref[k], 10);
    // Budget = energy of the 10 smallest singular values: by Eckart-Young rank 54 is the best that fits, 54 x 128 values.
    let budget = 0;
    for (let k = 54; k < 64; k++) budget += ref[k] * ref[k];
    expect(oracleValues([tile], budget * (1 + 1e-9))).toBe(54 * 128);
    expect(oracleValues([tile], 0)).toBe(64 * 128);
  });
});
