/**
 * The residual predictors of spec/FORMAT.md section 10.6.5, the blend
 * (predictor 6) above all: its inverse restores every code, missing cells
 * take their prediction, it reproduces linear ramps, and the archives that
 * choose it decode a real field bit for bit.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { MAX_PREDICTOR, PREDICTOR_SUMS, predict, predictedFill, Predictor, predictorBits, predictorBitsOf, predictorBitsRow, unpredict, walkPredictor } from '../../src/codec/reconstruct.js';
import { pack } from '../../src/pack.js';

const LIMIT = 2 ** 30;

describe('every predictor is inverted exactly by the decoder', () => {
  it('unpredict(predict(q)) = q for random grids of any predictor (fast-check)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 12 }),
        fc.integer({ min: 1, max: 12 }),
        fc.integer({ min: 0, max: MAX_PREDICTOR }),
        fc.integer({ min: 0, max: 2 ** 29 }),
        fc.infiniteStream(fc.double({ min: -1, max: 1, noNaN: true })),
        (m, n, kind, scale, noise) => {
          const it = noise[Symbol.iterator]();
          const q = Int32Array.from({ length: m * n }, () => Math.round(it.next().value * scale));
          const d = predict(q, m, n, LIMIT, kind);
          if (d === null) return; // a difference beyond 2^30: the encoder then tries another predictor
          const back = d.slice();
          expect(unpredict(back, m, n, LIMIT, kind)).toBe(true);
          expect(Array.from(back)).toEqual(Array.from(q));
        },
      ),
      { numRuns: 300 },
    );
  });

  it('unpredict stops where the generic walk (walkPredictor: the edge rule, then interior) leaves the limit, and otherwise gives its codes (fast-check)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 9 }),
        fc.integer({ min: 1, max: 9 }),
        fc.integer({ min: 1, max: 5 }),
        fc.integer({ min: 1, max: LIMIT }),
        fc.integer({ min: 0, max: 12 }),
        fc.array(fc.integer({ min: -LIMIT, max: LIMIT }), { minLength: 81, maxLength: 81 }),
        (m, n, kind, limit, shift, pool) => {
          // Differences up to 2 limit / 2^shift: large ones stop the walk, small ones let it finish.
          const span = Math.max(1, Math.floor((2 * limit) / 2 ** shift));
          const d = Int32Array.from({ length: m * n }, (_, c) => pool[c] % span);
          const walked = new Int32Array(m * n);
          const ok = walkPredictor(walked, m, n, kind, (c, p) => {
            const q = d[c] + p;
            return q > limit || q < -limit ? Number.NaN : q;
          });
          const back = d.slice();
          expect(unpredict(back, m, n, limit, kind)).toBe(ok);
          if (ok) expect(Array.from(back)).toEqual(Array.from(walked));
        },
      ),
      { numRuns: 500 },
    );
  });

  it('a missing cell filled with its prediction has a difference of 0, for the blend as for the others', () => {
    const m = 9;
    const n = 11;
    const q = Int32Array.from({ length: m * n }, (_, c) => ((c * 7919) % 61) - 30);
    const codes = Uint8Array.from({ length: m * n }, (_, c) => (c % 5 === 2 ? 1 : 0));
    for (let kind = 1; kind <= MAX_PREDICTOR; kind++) {
      const filled = predictedFill(q, codes, m, n, LIMIT, kind);
      const d = predict(filled, m, n, LIMIT, kind)!;
      for (let c = 0; c < m * n; c++) {
        if (codes[c] !== 0) expect(d[c], `predictor ${kind} cell ${c}`).toBe(0);
        else expect(filled[c]).toBe(q[c]);
      }
    }
  });
});

describe("the encoder's one-pass bit count of the plain predictors", () => {
  const bitLength = (d: Int32Array) => d.reduce((s, v) => s + 32 - Math.clz32(Math.abs(v)), 0);

  /** For random m x n grids of codes within +-maxCode, `bitsOf(q)` against the bit lengths of predict() (Infinity where it gives null), predictors 1 to 5. */
  function matchesPredict(maxCode: number, bitsOf: (q: Int32Array, m: number, n: number) => Float64Array): void {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 12 }),
        fc.integer({ min: 1, max: 12 }),
        fc.integer({ min: 0, max: maxCode }),
        fc.infiniteStream(fc.double({ min: -1, max: 1, noNaN: true })),
        (m, n, scale, noise) => {
          const it = noise[Symbol.iterator]();
          const q = Int32Array.from({ length: m * n }, () => Math.round(it.next().value * scale));
          const bits = bitsOf(q, m, n);
          for (let kind = 1; kind <= 5; kind++) {
            const d = predict(q, m, n, LIMIT, kind);
            expect(bits[kind - 1], `predictor ${kind}`).toBe(d === null ? Number.POSITIVE_INFINITY : bitLength(d));
          }
        },
      ),
      { numRuns: 300 },
    );
  }

  it('predictorBits gives the bit lengths of predict() for predictors 1 to 5, and Infinity where predict() gives null (fast-check)', () => {
    matchesPredict(2 ** 30, (q, m, n) => predictorBits(q, m, n, LIMIT));
  });

  it("predictorBitsRow's unchecked path (codes within 2^28) gives the bit lengths of predict() too (fast-check)", () => {
    matchesPredict(2 ** 28, (q, m, n) => {
      const sums = new Float64Array(PREDICTOR_SUMS);
      for (let i = 0; i < m; i++) expect(predictorBitsRow(q, n, LIMIT, i, sums, true)).toBe(true);
      return predictorBitsOf(sums);
    });
  });
});

describe('the blend predictor (6)', () => {
  it('reproduces linear ramps away from the tile edge', () => {
    // Lorenzo prediction, the Lorenzo step along the row above and linear extrapolation along the row
    // are exact on q = a i + b j (Ibarria et al. 2003 for Lorenzo, from memory; the other two by
    // the same algebra); the left and up parts miss by |b| and |a|, and the weights of the
    // definition keep their pull below half a step, so the blend rounds to the ramp.
    for (const [a, b] of [
      [1, 1],
      [-3, 7],
      [250, -1000],
      [0, 2],
    ]) {
      const m = 10;
      const n = 12;
      const q = Int32Array.from({ length: m * n }, (_, c) => a * Math.floor(c / n) + b * (c % n));
      const d = predict(q, m, n, LIMIT, Predictor.Blend)!;
      for (let i = 3; i < m; i++) for (let j = 3; j < n; j++) expect(d[i * n + j], `ramp ${a}, ${b} cell ${i}, ${j}`).toBe(0);
    }
  });

  it('a code beyond 2^30 after inverse prediction is refused (returns false)', () => {
    const d = new Int32Array(4 * 4).fill(2 ** 29);
    expect(unpredict(d, 4, 4, LIMIT, Predictor.Blend)).toBe(false);
  });

  it('volcano (vega-datasets 3.2.1, integers 94..195) at rel:1e-3 is stored with the blend and restored exactly', async () => {
    // A lattice step of 1 (the bound is below half the integer spacing): the values come back bit for bit.
    const path = fileURLToPath(new URL('../../node_modules/vega-datasets/data/volcano.json', import.meta.url));
    const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: number[] };
    const values = Float32Array.from(g.values);
    const bytes = pack(values, [g.height, g.width], { bound: 'rel:1e-3' });
    const a = await open(bytes);
    const ix = (await a.loadIndex()).fields[0];
    const payload = bytes.subarray(ix.offset[0], ix.offset[0] + ix.length[0]);
    // spec/FORMAT.md 10.6.1 and 10.6.5: method, flags (Residual, centre form 2: an integer), rank 0 (no factor
    // block), the centre's svarint (the lattice's integer centre, 94..195: two bytes), then the residual byte
    // (predictor in bits 0-2, step form 3 in bits 4-5: an integer step) and the step's varint, 1.
    expect(payload[0]).toBe(1);
    expect(payload[1]).toBe(0x02 | (2 << 5));
    expect(payload[2]).toBe(0);
    expect(payload[3] >= 0x80 && payload[4] < 0x80).toBe(true);
    expect(payload[5]).toBe(Predictor.Blend | (3 << 4));
    expect(payload[6]).toBe(1);
    expect(Array.from((await a.read()).values)).toEqual(Array.from(values));
  });
});
