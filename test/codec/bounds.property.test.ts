/**
 * Property tests of the error bounds: for random fields, tile sizes and
 * bounds, every decoded valid value meets the bound, and the figures the
 * index records per tile and per field equal what this test measures itself
 * from the decoded values.
 *
 * The definitions checked are the library's stated contract: abs:E bounds
 * |x - x'| <= E for every finite non-fill value; rel:R means E = R * (max - min)
 * of those values; rmse:E bounds sqrt(mean((x - x')^2)) <= E over them;
 * psnr:D means RMSE <= range / 10^(D/20) (PSNR = 20 log10(range / RMSE),
 * the usual definition with the value range as peak, from memory).
 *
 * The fields are generated (sums of a few separable cosine terms, noise,
 * constants, scaled from 1e-30 to 1e30): a property test needs inputs of
 * every kind, and the bound itself is the external reference.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { pack } from '../../src/pack.js';
import type { BoundMode, Dtype, FloatArray } from '../../src/types.js';
import { asDtype, close, expectIndexMatches, measure, prng, validCells, validRange } from './measure.js';

/** Fixed seed: CI runs the same cases every time. */
const SEED = 20240611;

type Kind = 'smooth' | 'noisy' | 'constant' | 'noise';

interface Case {
  rows: number;
  cols: number;
  kind: Kind;
  terms: number;
  /** Noise amplitude of 'noisy' fields, relative to the smooth part. */
  noise: number;
  /** Magnitude: values are scale * (offset + shape). */
  scale: number;
  offset: number;
  /** Fraction of cells replaced by NaN, +-Inf or the fill value. */
  holes: number;
  dtype: Dtype;
  seed: number;
  tile: [number, number];
  mode: BoundMode;
  /** log10 of the bound's size: of R (rel), of E / scale (abs, rmse); D in dB (psnr). */
  level: number;
}

const side = (max: number) => fc.oneof({ arbitrary: fc.constant(1), weight: 1 }, { arbitrary: fc.integer({ min: 1, max }), weight: 5 });

const caseArb: fc.Arbitrary<Case> = fc.record({
  rows: side(70),
  cols: side(90),
  kind: fc.constantFrom<Kind>('smooth', 'smooth', 'noisy', 'constant', 'noise'),
  terms: fc.integer({ min: 1, max: 4 }),
  noise: fc.constantFrom(1e-6, 1e-3, 1e-1),
  scale: fc.constantFrom(1e-30, 1e-12, 1, 1e3, 1e12, 1e30),
  offset: fc.constantFrom(0, 0, 1, 1000),
  holes: fc.constantFrom(0, 0, 0, 0.05, 0.3),
  dtype: fc.constantFrom<Dtype>('f32', 'f64'),
  seed: fc.integer({ min: 0, max: 0x7fffffff }),
  tile: fc.tuple(fc.integer({ min: 1, max: 40 }), fc.integer({ min: 1, max: 40 })),
  mode: fc.constantFrom<BoundMode>('abs', 'rel', 'rmse', 'psnr'),
  level: fc.double({ min: 0, max: 1, noNaN: true }),
});

const FILL = -999;

/** Build the field of a case (row-major, in its dtype). */
function makeField(c: Case): FloatArray {
  const rnd = prng(c.seed);
  const { rows, cols } = c;
  const v = new Float64Array(rows * cols);
  if (c.kind === 'constant') {
    v.fill(0.5 + rnd());
  } else if (c.kind === 'noise') {
    for (let i = 0; i < v.length; i++) v[i] = 2 * rnd() - 1;
  } else {
    for (let k = 0; k < c.terms; k++) {
      const a = 0.1 + rnd();
      const fi = 3 * Math.PI * rnd();
      const fj = 3 * Math.PI * rnd();
      const pi = 2 * Math.PI * rnd();
      const pj = 2 * Math.PI * rnd();
      for (let i = 0; i < rows; i++) {
        const u = Math.cos((fi * i) / Math.max(1, rows - 1) + pi);
        for (let j = 0; j < cols; j++) v[i * cols + j] += a * u * Math.cos((fj * j) / Math.max(1, cols - 1) + pj);
      }
    }
    if (c.kind === 'noisy') for (let i = 0; i < v.length; i++) v[i] += c.noise * (2 * rnd() - 1);
  }
  for (let i = 0; i < v.length; i++) v[i] = c.scale * (c.offset + v[i]);
  if (c.holes > 0) {
    for (let i = 0; i < v.length; i++) {
      if (rnd() >= c.holes) continue;
      const r = rnd();
      v[i] = r < 0.4 ? FILL : r < 0.7 ? NaN : r < 0.85 ? Infinity : -Infinity;
    }
  }
  return asDtype(v, c.dtype);
}

/** The bound text of a case: sizes spread over several decades. */
function boundOf(c: Case): string {
  switch (c.mode) {
    case 'rel':
      return `rel:${10 ** (-1 - 5 * c.level)}`; // 1e-1 .. 1e-6
    case 'abs':
      return `abs:${c.scale * 10 ** (-1 - 5 * c.level)}`;
    case 'rmse':
      return `rmse:${c.scale * 10 ** (-1 - 5 * c.level)}`;
    case 'psnr':
      return `psnr:${20 + 100 * c.level}`; // 20 .. 120 dB
  }
}

/** The tolerance a bound resolves to, computed here from the definitions above. */
function expectedTolerance(mode: BoundMode, value: number, range: [number, number] | null): number {
  const span = range ? range[1] - range[0] : 0;
  if (mode === 'abs' || mode === 'rmse') return value;
  if (mode === 'rel') return value * span;
  return span / 10 ** (value / 20);
}

async function checkCase(c: Case): Promise<void> {
  const values = makeField(c);
  const shape = [c.rows, c.cols];
  const fill = c.holes > 0 ? FILL : null;
  const bound = boundOf(c);
  // Extreme values are data here: the fill-value guard (pack's fill option) is off.
  const bytes = pack(values, shape, { bound, tile: c.tile, fill, fillGuard: false, dtype: c.dtype });
  const archive = await open(bytes);
  const h = archive.header.fields[0];
  const got = await archive.read();
  expect(got.dtype).toBe(c.dtype);
  expect(got.values).toBeInstanceOf(c.dtype === 'f32' ? Float32Array : Float64Array);

  const valid = validCells(values, c.dtype, fill);
  const range = validRange(values, valid);
  const tol = expectedTolerance(h.bound.mode, h.bound.value, range);
  expect(close(h.bound.tolerance, tol), `tolerance ${h.bound.tolerance} vs ${tol}`).toBe(true);
  if (range) expect(h.bound.range).toEqual(range);
  else expect(h.bound.range).toBeNull();

  const m = measure(values, got.values, shape, c.tile, c.dtype, fill);
  expect(m.specialMismatches).toBe(0);
  expect(m.nonFinite).toBe(0);
  if (c.mode === 'abs' || c.mode === 'rel') {
    // Pointwise: every valid value, no slack.
    for (let i = 0; i < values.length; i++) {
      if (!valid[i]) continue;
      const d = Math.abs(values[i] - got.values[i]);
      if (!(d <= h.bound.tolerance)) expect.fail(`cell ${i}: |${values[i]} - ${got.values[i]}| = ${d} > ${h.bound.tolerance}`);
    }
  } else {
    expect(m.summary.rmse, `RMSE ${m.summary.rmse} > ${h.bound.tolerance}`).toBeLessThanOrEqual(h.bound.tolerance);
  }
  await expectIndexMatches(archive, m);
  const ix = await archive.fieldIndex();
  ix.method.forEach((method, t) => {
    expect([0, 1]).toContain(method);
    if (method === 0) expect(ix.rank[t]).toBe(0);
  });
  const report = await archive.check(values);
  expect(report.failures).toEqual([]);
  expect(report.ok).toBe(true);
}

describe('error bounds hold on random fields', () => {
  it('every mode, dtype, shape and tile size', async () => {
    await fc.assert(fc.asyncProperty(caseArb, checkCase), { seed: SEED, numRuns: 150 });
    // Explicit limits here: each run packs, reads and checks a field, and the run counts
    // are what give the properties their reach (this one 2-4 s on this 2-core machine).
  }, 120_000);

  it('one-row and one-column fields', async () => {
    const thin = fc.tuple(caseArb, fc.boolean()).map(([c, row]) => (row ? { ...c, rows: 1 } : { ...c, cols: 1 }));
    await fc.assert(fc.asyncProperty(thin, checkCase), { seed: SEED + 1, numRuns: 40 });
  }, 60_000);

  it('smooth fields of at least 24x24 (where low-rank payloads compete)', async () => {
    const smooth = caseArb.map((c) => ({ ...c, kind: 'smooth' as const, rows: Math.max(c.rows, 24), cols: Math.max(c.cols, 24) }));
    await fc.assert(fc.asyncProperty(smooth, checkCase), { seed: SEED + 2, numRuns: 40 });
  }, 60_000);
});
