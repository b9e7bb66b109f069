/**
 * The pointwise encoder's check of a candidate (src/codec/settle.ts
 * settleCodes, in the WebAssembly kernel of kernels/settle.ts or in
 * JavaScript): the codes, the exceptions, the rough bits and the five
 * predictors' sums, bit for bit the same on both paths, and on real data
 * the same as an independent reference: the low-rank part as ml-matrix's
 * product (reference library; its mmul sums each entry from 0 in
 * increasing k, as the format's reconstruction does), each code as
 * ECMA-262 Math.round (from memory: the integer nearest, a tie towards
 * +Infinity) and each check as the reconstruction of spec/FORMAT.md.
 */
import { Matrix } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { fillWords } from '../../src/codec/mask.js';
import { ensureSvd, type PreparedTile, prepareTile } from '../../src/codec/prepare.js';
import { PREDICTOR_SUMS, predict, predictorBits, predictorBitsOf } from '../../src/codec/reconstruct.js';
import { MAX_INT } from '../../src/codec/section.js';
import { type LowRankPart, settleCodes, unsettledCells } from '../../src/codec/settle.js';
import { correct, pointwiseFactors } from '../../src/codec/tile-encode.js';
import { pointwiseSearch } from '../../src/codec/pointwise-search.js';
import { binary32Below } from '../../src/codec/steps.js';
import type { Settled } from '../../src/wasm/settle.js';
import { precip, volcano } from '../archive/datasets.js';
import { entries } from '../float-bits.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

/** What one check gives. */
interface Outcome {
  q: number[];
  exceptions: number[];
  settled: Settled;
  sums: number[] | null;
}

/** settleCodes into a q that starts as garbage (every cell must be written). */
function settle(t: PreparedTile, f: LowRankPart | null, center: number, e: number, step: number): Outcome {
  const q = new Int32Array(t.m * t.n).fill(-77);
  const exceptions: number[] = [];
  const sums = t.classes.special > 0 ? null : new Float64Array(PREDICTOR_SUMS);
  const settled = settleCodes(t, f, center, e, step, q, exceptions, sums);
  return { q: Array.from(q), exceptions, settled, sums: sums && Array.from(sums) };
}

/**
 * Both paths give the same outcome; the kernel's. Only the kernel counts
 * the non-zero differences: they are checked against predict()'s
 * differences (tested against the published predictors in
 * predictors.test.ts) and the codes themselves.
 */
function same(t: PreparedTile, f: LowRankPart | null, center: number, e: number, step: number, where: string): Outcome {
  const { js, wasm } = onBothPaths(() => settle(t, f, center, e, step));
  expect(js.settled.nonzero, where).toBeNull();
  const counts = wasm.settled.nonzero;
  expect(counts, where).not.toBeNull();
  const q = Int32Array.from(wasm.q);
  const nonZeros = (v: ArrayLike<number>) => Array.from(v).filter((x) => x !== 0).length;
  expect(counts![5], where).toBe(nonZeros(q));
  for (let kind = 1; kind <= 5; kind++) {
    const d = wasm.settled.sumsOk ? predict(q, t.m, t.n, MAX_INT, kind) : null;
    // Counted wherever the sums are kept (NaN otherwise); where a predictor's differences pass the limit its count is of no use.
    if (t.classes.special === 0 && d !== null) expect(counts![kind - 1], `${where}, predictor ${kind}`).toBe(nonZeros(d));
    if (!wasm.settled.sumsOk) expect(counts![kind - 1], where).toBeNaN();
  }
  expect({ ...wasm.settled, nonzero: null }, where).toEqual(js.settled);
  expect(wasm.exceptions, where).toEqual(js.exceptions);
  expect(wasm.sums, where).toEqual(js.sums);
  // Arrays of a million entries compare slowly with toEqual: the first cell that differs.
  expect(wasm.q.findIndex((v, c) => v !== js.q[c]), where).toBe(-1);
  return wasm;
}

/** Random factors of rank r for an m x n tile, scaled so the product is of the order of `scale`. */
function factors(m: number, n: number, r: number, rnd: () => number, scale = 1, specials = false): LowRankPart {
  const l = entries(m * r, rnd, specials).map((x) => x * scale);
  return { rank: r, l, w: entries(r * n, rnd, specials) };
}

describe('settleCodes', () => {
  it('gives the same codes, exceptions, bits and predictor sums in the kernel as in JavaScript, on odd shapes, ranks 0 to 9, f32 and f64, with and without a field layer', () => {
    const rnd = mulberry32(61);
    const shapes: [number, number][] = [
      [1, 1],
      [1, 37],
      [37, 1],
      [3, 5],
      [7, 9],
      [16, 16],
      [13, 31],
    ];
    for (const [m, n] of shapes) {
      for (const dtype of ['f32', 'f64'] as const) {
        for (const r of [0, 1, 3, 9]) {
          for (const layered of [false, true]) {
            const raw = entries(m * n, rnd, false).map((x) => x * 3);
            const orig = dtype === 'f32' ? Float32Array.from(raw) : raw;
            const layer = layered ? entries(m * n, rnd, false) : null;
            const t = prepareTile(orig, m, n, dtype, null, 0.01, 'one', layer);
            // Steps from coarse (most codes 0) to fine (codes in the thousands), and a bound a little under half a step (exceptions).
            for (const step of [8, 0.37, 1e-3]) {
              const where = `${m} x ${n} ${dtype} rank ${r} layer ${layered} step ${step}`;
              const out = same(t, r > 0 ? factors(m, n, r, rnd) : null, 0.25, 0.45 * step, step, where);
              // The sums are predictorBits' of the codes (tested against predict() in predictors.test.ts).
              expect(predictorBitsOf(out.settled.sumsOk ? Float64Array.from(out.sums!) : null), where).toEqual(predictorBits(Int32Array.from(out.q), m, n, MAX_INT));
            }
          }
        }
      }
    }
  });

  it('gives the same on tiles of several bands of rows and on a row longer than a band (2^16 cells)', { timeout: 60_000 }, () => {
    const rnd = mulberry32(62);
    for (const [m, n, r] of [
      [300, 301, 4],
      [2, 70001, 2],
    ]) {
      const orig = Float32Array.from(entries(m * n, rnd, false));
      const t = prepareTile(orig, m, n, 'f32', null, 0.01);
      const out = same(t, factors(m, n, r, rnd), -1.5, 0.004, 0.009, `${m} x ${n}`);
      expect(out.exceptions.length).toBeGreaterThan(0);
      expect(predictorBitsOf(Float64Array.from(out.sums!))).toEqual(predictorBits(Int32Array.from(out.q), m, n, MAX_INT));
    }
  });

  it('skips missing cells (fill value, NaN, infinities): code 0, never an exception, no predictor sums', () => {
    const rnd = mulberry32(63);
    for (const dtype of ['f32', 'f64'] as const) {
      for (const [m, n] of [
        [1, 9],
        [9, 1],
        [11, 13],
      ]) {
        const raw = entries(m * n, rnd, false);
        const specials = [-9999, Number.NaN, Infinity, -Infinity];
        for (let c = 0; c < m * n; c++) if (rnd() < 0.3) raw[c] = specials[Math.floor(rnd() * specials.length)];
        const orig = dtype === 'f32' ? Float32Array.from(raw) : raw;
        const t = prepareTile(orig, m, n, dtype, fillWords(-9999, dtype), 0.01);
        const out = same(t, factors(m, n, 2, rnd), 0, 0.001, 0.0021, `${m} x ${n} ${dtype}`);
        expect(out.sums).toBeNull();
        for (let c = 0; c < m * n; c++) {
          if (t.classes.codes[c] === 0) continue;
          expect(out.q[c]).toBe(0);
          expect(out.exceptions).not.toContain(c);
        }
      }
    }
  });

  it('gives code 0 and an exception where a code would pass +-2^30, and drops the predictor sums where an edge difference passes it', () => {
    // Rank 0, centre 0, step 1: the codes are the values themselves (f64 integers).
    const m = 6;
    const n = 9;
    const rnd = mulberry32(64);
    const grids: [string, (c: number) => number][] = [
      ['huge values', (c) => (c % 4 === 1 ? 1e300 * (c % 3 === 0 ? -1 : 1) : Math.floor(rnd() * 10))],
      ['codes at the limit', (c) => (c % 5 === 0 ? MAX_INT : c % 5 === 2 ? -MAX_INT : 3)],
      ['codes just past the limit', (c) => (c % 7 === 3 ? MAX_INT + 1 : c % 7 === 4 ? -MAX_INT - 1 : -2)],
      ['an edge difference past the limit', (c) => (c === 1 ? MAX_INT : c === 2 ? -MAX_INT : 1)],
      ['interior differences past the limit', (c) => (Math.floor(c / n) % 2 === 1 && c % n > 0 ? (c % 2 ? MAX_INT : -MAX_INT) : 0)],
      ['codes of 2^22 to 2^28', (c) => (c % 3 === 0 ? 2 ** 22 + c : c % 3 === 1 ? -(2 ** 27) - c : 2 ** 28 - 1)],
      ['all zero', () => 0],
    ];
    for (const [what, value] of grids) {
      const orig = Float64Array.from({ length: m * n }, (_, c) => value(c));
      const t = prepareTile(orig, m, n, 'f64', null, 0.5);
      const out = same(t, null, 0, 0.5, 1, what);
      for (let c = 0; c < m * n; c++) {
        // A code is the value where it is within +-2^30 (a whole number, so |value - code| = 0 <= e); else 0 and an exception.
        const inside = Math.abs(orig[c]) <= MAX_INT;
        expect(out.q[c], `${what}, cell ${c}`).toBe(inside ? orig[c] : 0);
        expect(out.exceptions.includes(c), `${what}, cell ${c}`).toBe(!inside);
      }
      expect(out.settled.any, what).toBe(out.q.some((v) => v !== 0));
      expect(predictorBitsOf(out.settled.sumsOk ? Float64Array.from(out.sums!) : null), what).toEqual(predictorBits(Int32Array.from(out.q), m, n, MAX_INT));
    }
  });

  it('gives the same with special values in the factors and the centre (infinite and NaN low-rank parts: code 0, an exception)', () => {
    const rnd = mulberry32(65);
    for (const center of [0, -0, 1e308, Infinity]) {
      const m = 9;
      const n = 14;
      const orig = Float32Array.from(entries(m * n, rnd, false));
      const t = prepareTile(orig, m, n, 'f32', null, 0.01);
      same(t, factors(m, n, 3, rnd, 1, true), center, 0.01, binary32Below(0.02), `centre ${center}`);
    }
  });

  it('settles annual-precip (vega-datasets) as ml-matrix and Math.round do, at ranks 0 to 6, on both paths', () => {
    // vega-datasets data/annual-precip.json, rows 0..167, columns 0..143 (a 168 x 144 tile; no missing cells there).
    const g = precip();
    const m = 168;
    const n = 144;
    const orig = Float32Array.from({ length: m * n }, (_, c) => g.values[Math.floor(c / n) * g.shape[1] + (c % n)]);
    let lo = Infinity;
    let hi = -Infinity;
    for (const v of orig) {
      lo = Math.min(lo, v);
      hi = Math.max(hi, v);
    }
    const e = 1e-3 * (hi - lo);
    const t = prepareTile(orig, m, n, 'f32', null, e);
    expect(t.classes.special).toBe(0);
    ensureSvd(t, 8);
    const step = binary32Below(2 * e);
    for (const r of [0, 1, 2, 6]) {
      const f = r > 0 ? pointwiseFactors(t, r, e) : null;
      if (r > 0) expect(f).not.toBeNull();
      const out = same(t, f, t.center, e, step, `rank ${r}`);
      // The reference: L W by ml-matrix (reference library), + centre, Math.round (ECMA-262, from memory) of the scaled residual,
      // and the check of the reconstruction rounded to binary32 (spec/FORMAT.md, "Reconstruction").
      const lw = f ? new Matrix(Array.from({ length: m }, (_, i) => Array.from(f.l.subarray(i * r, i * r + r)))).mmul(new Matrix(Array.from({ length: r }, (_, k) => Array.from(f.w.subarray(k * n, k * n + n))))) : null;
      const q: number[] = [];
      const failing: number[] = [];
      for (let c = 0; c < m * n; c++) {
        const b = (lw ? lw.get(Math.floor(c / n), c % n) : 0) + t.center;
        let v = Math.round((orig[c] - b) / step);
        if (!(Math.abs(v) <= MAX_INT)) v = 0;
        q.push(v | 0);
        if (!(Math.abs(orig[c] - Math.fround(b + (v | 0) * step)) <= e)) failing.push(c);
      }
      expect(out.q.findIndex((v, c) => v !== q[c]), `rank ${r}`).toBe(-1);
      expect(out.exceptions, `rank ${r}`).toEqual(failing);
    }
  });
});

describe('correct', () => {
  it('gives the same candidate from a grid given back by another (garbage in it) as from a new one, on volcano (vega-datasets) with missing cells', () => {
    // vega-datasets data/volcano.json (61 x 87 heights in metres), with a block marked missing by the fill value.
    const g = volcano();
    const [m, n] = g.shape;
    const orig = Float64Array.from(g.values);
    for (let i = 10; i < 20; i++) for (let j = 30; j < 45; j++) orig[i * n + j] = -1;
    const e = 0.5;
    for (const fill of [null, -1]) {
      const t = prepareTile(orig, m, n, 'f64', fill === null ? null : fillWords(fill, 'f64'), e);
      ensureSvd(t, 4);
      const f = pointwiseFactors(t, 3, e);
      const fresh = correct(t, f, e, undefined, undefined, false);
      const search = { spare: [new Int32Array(m * n).fill(12345)] };
      const reused = correct(t, f, e, undefined, undefined, false, search);
      expect(search.spare).toHaveLength(0);
      expect(reused.exceptions).toEqual(fresh.exceptions);
      expect(reused.predictor).toBe(fresh.predictor);
      expect(reused.bits).toBe(fresh.bits);
      expect(Array.from(reused.raw!)).toEqual(Array.from(fresh.raw!));
      // For the search, a plain predictor's differences are formed later (q is then the codes) where the kernel counted their non-zero entries.
      const deferred = reused.deferred === true;
      expect(deferred).toBe(fill === null && fresh.predictor !== 0);
      expect(Array.from(deferred ? reused.raw! : reused.q!)).toEqual(Array.from(deferred ? fresh.raw! : fresh.q!));
      expect(reused.nonzero ?? Array.from(reused.q!).filter((v) => v !== 0).length).toBe(Array.from(fresh.q!).filter((v) => v !== 0).length);
    }
  });

  it('checks a candidate without a residual (bound 0) cell by cell on both paths: the cells whose low-rank part misses', () => {
    const rnd = mulberry32(66);
    const m = 23;
    const n = 19;
    const orig = Float32Array.from(entries(m * n, rnd, false));
    const t = prepareTile(orig, m, n, 'f32', null, 0);
    const f = factors(m, n, 2, rnd);
    const { js, wasm } = onBothPaths(() => unsettledCells(t, f, 0.5, 1));
    expect(wasm).toEqual(js);
    // The reference: the low-rank part by ml-matrix (reference library) plus the centre, rounded to binary32 (spec/FORMAT.md).
    const lw = new Matrix(Array.from({ length: m }, (_, i) => Array.from(f.l.subarray(i * 2, i * 2 + 2)))).mmul(new Matrix([Array.from(f.w.subarray(0, n)), Array.from(f.w.subarray(n))]));
    const failing = Array.from({ length: m * n }, (_, c) => c).filter((c) => !(Math.abs(orig[c] - Math.fround(lw.get(Math.floor(c / n), c % n) + 0.5)) <= 1));
    expect(js).toEqual(failing);
    expect(failing.length).toBeGreaterThan(0);
  });
});

/** The span of a grid's values that are not NaN (max less min). */
function validSpan(values: Iterable<number>): number {
  let lo = Infinity;
  let hi = -Infinity;
  for (const v of values) {
    if (v === v) {
      lo = Math.min(lo, v);
      hi = Math.max(hi, v);
    }
  }
  return hi - lo;
}

describe('pointwiseSearch', () => {
  it('gives the same payloads whatever searches ran before and in between (the code grids it hands on from tile to tile), on annual-precip (vega-datasets)', { timeout: 60_000 }, () => {
    // vega-datasets data/annual-precip.json: four 84 x 90 blocks (no missing cells there), at rel:1e-3 of the grid's range.
    const g = precip();
    const m = 84;
    const n = 90;
    const e = 1e-3 * validSpan(g.values);
    const block = (k: number) => Float32Array.from({ length: m * n }, (_, c) => g.values[(Math.floor(k / 2) * m + Math.floor(c / n)) * g.shape[1] + (k % 2) * n + (c % n)]);
    const tile = (k: number) => prepareTile(block(k), m, n, 'f32', null, e);
    // Each block searched and finished at once.
    const alone = [0, 1, 2, 3].map((k) => pointwiseSearch(tile(k), e).finish());
    // Every search first, the finishing after them all, in another order: a grid still held by an unfinished search is never reused.
    const pending = [3, 1, 0, 2].map((k) => ({ k, search: pointwiseSearch(tile(k), e) }));
    for (const { k, search } of pending.reverse()) expect(Array.from(search.finish()), `block ${k}`).toEqual(Array.from(alone[k]));
  });

  it('weighs a dense tile by its first candidate, and codes the others only when asked: the same payload (annual-precip, vega-datasets)', { timeout: 60_000 }, () => {
    // vega-datasets data/annual-precip.json: the five whole 32 x 360 strips, at rel:3e-3 of the grid's range.
    const g = precip();
    const [m, n] = [32, 360];
    const e = 3e-3 * validSpan(g.values);
    const strip = (k: number) => prepareTile(Float32Array.from(g.values.subarray(k * m * n, (k + 1) * m * n)), m, n, 'f32', null, e);
    const above: number[] = [];
    for (let k = 0; k < 5; k++) {
      // Every strip searched first, then asked for its smallest candidate and finished, the others' searches in between.
      const searches = [0, 1, 2, 3, 4].map((j) => pointwiseSearch(strip(j), e));
      const best = searches[k].best();
      expect(searches[k].trialBytes, `strip ${k}`).toBeGreaterThanOrEqual(best.bytes);
      if (searches[k].trialBytes > best.bytes) above.push(k);
      // Finished, the payload of a search finished at once, with no other search in between.
      expect(Array.from(searches[k].finish()), `strip ${k}`).toEqual(Array.from(pointwiseSearch(strip(k), e).finish()));
    }
    // Some strip's first candidate is not its smallest (measured: rows 96 to 127), so the others were coded after the weighing.
    expect(above.length).toBeGreaterThan(0);
  });
});

