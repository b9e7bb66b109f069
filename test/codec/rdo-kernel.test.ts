/**
 * The walks of the residual search under L2 bounds in the WebAssembly
 * kernels (kernels/rdo.ts and kernels/rdo-blend.ts, loaded by
 * src/wasm/rdo.ts) against their JavaScript versions (RdoWalk.run, with
 * every predictor, and RowFloor in src/codec/rdo.ts), bit
 * for bit: residualForMse and rankZeroForMse give the same payload bytes
 * (or the same null) on both paths, on two open datasets and on tiles of
 * every shape class (1 x n, m x 1, 1 x 1), with missing cells, binary64
 * values, a field layer's term, differences past the rough-bits table
 * (the JavaScript's Math.log2, imported) and codes past the limit. And
 * the walks' floor (RowFloor, kernels/rdo-floor.ts) against what a walk
 * adds, by its definition: never more, for every predictor, so the walks it
 * cuts short end as they would have.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { fillWords } from '../../src/codec/mask.js';
import { prepareTile, type PreparedTile } from '../../src/codec/prepare.js';
import { bitsTable, FLOOR_KEEP, RdoWalk, RowFloor, rankZeroForMse, residualForMse } from '../../src/codec/rdo.js';
import { blendWeights, Predictor, walkPredictor } from '../../src/codec/reconstruct.js';
import { pointwiseFactors } from '../../src/codec/tile-encode.js';
import { RDO_KERNELS } from '../../src/wasm/kernels-bytes.js';
import { kernels } from '../../src/wasm/kernels.js';
import { RdoWalks } from '../../src/wasm/rdo.js';
import { onBothPaths, useKernelMode } from '../kernel-mode.js';
import { mulberry32 } from '../rng.js';

useKernelMode('auto');

/**
 * A vega-datasets grid (npm package vega-datasets 3.2.1,
 * node_modules/vega-datasets/data/): volcano.json, elevations of Maunga
 * Whau on a 10 m grid (87 wide x 61 high), and annual-precip.json, global
 * annual precipitation of 2016 at 1 degree (360 wide x 168 high).
 */
function vega(name: string): { m: number; n: number; values: (number | null)[] } {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}`, import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: (number | null)[] };
  return { m: g.height, n: g.width, values: g.values };
}

/** A block of a vega-datasets grid (null as NaN: a missing cell). */
function block(name: string, i0: number, j0: number, m: number, n: number): Float32Array {
  const g = vega(name);
  const out = new Float32Array(m * n);
  for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) out[i * n + j] = g.values[(i0 + i) * g.n + j0 + j] ?? Number.NaN;
  return out;
}

/** The RMSE limit of PSNR `db` over the valid values' range (PSNR = 20 log10(range / RMSE), common usage, from memory). */
function psnrTol(values: ArrayLike<number>, db: number): number {
  let lo = Infinity;
  let hi = -Infinity;
  for (let c = 0; c < values.length; c++) {
    const v = values[c];
    if (Number.isFinite(v)) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
  }
  return (hi - lo) / 10 ** (db / 20);
}

/** residualForMse (factors of `rank`, or none) on both paths: each one's bytes, or null. */
function bothPayloads(t: PreparedTile, tol: number, rank: number, atMost = Infinity) {
  const mse = 0.97 * tol * tol;
  return onBothPaths(() => {
    const f = rank > 0 ? pointwiseFactors(t, rank, Math.sqrt(3) * tol) : null;
    const p = rank > 0 ? residualForMse(t, f, mse, atMost) : rankZeroForMse(t, mse, atMost);
    return p === null ? null : Array.from(p);
  });
}

describe('the rate-distortion kernels module', () => {
  it('is there in Node 20, and lays out a tile', () => {
    const k = kernels();
    expect(k).not.toBeNull();
    expect(k?.module(RDO_KERNELS)).not.toBeNull();
    const walks = RdoWalks.open(new Float32Array(6), new Float64Array(6), new Uint8Array(6), 2, 3, new Float64Array(4096), blendWeights());
    expect(walks).not.toBeNull();
    walks?.close();
  });
});

/**
 * One walk on both paths over the tile's values against `base` (by
 * default its centre everywhere): the JavaScript's RdoWalk.run over RowFloor.of's sums, and
 * the kernel's over the sums it computes; each one's outcome, sums and
 * differences (the kernel's sums are checked equal to the JavaScript's too).
 */
function walkBoth(t: PreparedTile, kind: number, step: number, w: number, seLimit: number, bitsLimit: number, base = new Float64Array(t.m * t.n).fill(t.center)) {
  const cells = t.m * t.n;
  const floor = RowFloor.of(t.orig, base, t.classes.codes, t.m, t.n, step, kind);
  const dJs = new Int32Array(cells);
  const run = new RdoWalk(t.orig, base, t.classes.codes, dJs, step, w);
  const ok = run.run(new Int32Array(cells), t.m, t.n, kind, seLimit, bitsLimit, floor);
  const js = ok ? { se: run.se, bits: run.bits, d: Array.from(dJs) } : false;
  const walks = RdoWalks.open(t.orig, base, t.classes.codes, t.m, t.n, bitsTable(), blendWeights());
  expect(walks).not.toBeNull();
  try {
    const sums = walks!.floor(step, kind);
    expect(Array.from(sums.restSe)).toEqual(Array.from(floor.restSe));
    expect(Array.from(sums.restBits)).toEqual(Array.from(floor.restBits));
    expect(Array.from(sums.restValid)).toEqual(Array.from(floor.restValid));
    const r = walks!.walk(kind, step, w, seLimit, bitsLimit, FLOOR_KEEP, sums);
    const dK = new Int32Array(cells);
    if (r) walks!.differences(dK);
    return { js, wasm: r ? { se: r.se, bits: r.bits, d: Array.from(dK) } : r };
  } finally {
    walks!.close();
  }
}

/** Every predictor: the plain ones (kernels/rdo.ts) and the blend (kernels/rdo-blend.ts). */
const KINDS = [Predictor.None, Predictor.Lorenzo, Predictor.Left, Predictor.Up, Predictor.Average, Predictor.Median, Predictor.Blend];

describe('a walk in the kernels', () => {
  it('gives the JavaScript\'s sums and differences for every predictor, on vega-datasets volcano.json and annual-precip.json', () => {
    const g = vega('volcano.json');
    const volcano = prepareTile(Float32Array.from(g.values as number[]), g.m, g.n, 'f32', null, 1);
    const precip = prepareTile(block('annual-precip.json', 0, 0, 48, 80), 48, 80, 'f32', null, 5);
    for (const t of [volcano, precip]) {
      for (const kind of KINDS) {
        for (const [step, w] of [
          [0.7, 0.15],
          [3, 0.6],
        ]) {
          const { js, wasm } = walkBoth(t, kind, step, w, Infinity, Infinity);
          expect(js).not.toBe(false);
          expect(wasm, `${t.m} x ${t.n} kind ${kind} step ${step}`).toEqual(js);
        }
      }
    }
  });

  it('stops where the JavaScript stops: at the squared-error limit, at the rough-bits limit, and on codes past the limit', () => {
    const g = vega('volcano.json');
    const t = prepareTile(Float32Array.from(g.values as number[]), g.m, g.n, 'f32', null, 1);
    // The plain predictors' walk checks its limits row by row, the blend's cell by cell.
    for (const kind of [Predictor.Lorenzo, Predictor.Blend]) {
      const whole = walkBoth(t, kind, 1, 0.3, Infinity, Infinity);
      expect(whole.js).not.toBe(false);
      const { se, bits } = whole.js as { se: number; bits: number };
      // Just above and just below each sum (the walk ends within a limit it meets exactly).
      for (const [seLimit, bitsLimit] of [
        [se, bits],
        [se * (1 - 1e-12), Infinity],
        [Infinity, bits * (1 - 1e-12)],
        [0.5 * se, Infinity],
        [Infinity, 0.5 * bits],
      ]) {
        const r = walkBoth(t, kind, 1, 0.3, seLimit, bitsLimit);
        expect(r.wasm, `kind ${kind} limits ${seLimit} ${bitsLimit}`).toEqual(r.js);
      }
    }
    // A step of 3 x 10^-8 m: codes of up to about 2 x 10^9 from the centre, past 2^30 (section.ts MAX_INT) on the higher ground.
    for (const kind of KINDS) {
      const r = walkBoth(t, kind, 3e-8, 0.3, Infinity, Infinity);
      expect(r.js).toBe(false);
      expect(r.wasm).toBe(false);
    }
    // At the limit itself, with Left (and the blend), step 1 and a base of 0: codes 0 and 2^30 are kept, then 2^30 + 1 is
    // the nearest and cheaper than 2^30 (an error of 1 + 0.3 x 1 rough bit against 0.3 x 3), and is past the limit though
    // its difference is 1.
    const edge = prepareTile(Float64Array.from([0, 2 ** 30, 2 ** 30 + 1]), 1, 3, 'f64', null, 1);
    const inside = prepareTile(Float64Array.from([0, 2 ** 30 - 1, 2 ** 30]), 1, 3, 'f64', null, 1);
    // On a first row the blend predicts as Left does.
    for (const kind of [Predictor.Left, Predictor.Blend]) {
      const atEdge = walkBoth(edge, kind, 1, 0.3, Infinity, Infinity, new Float64Array(3));
      expect(atEdge.js).toBe(false);
      expect(atEdge.wasm).toBe(false);
      // One below: 2^30 - 1 and 2^30 are within it.
      const within = walkBoth(inside, kind, 1, 0.3, Infinity, Infinity, new Float64Array(3));
      expect(within.js).not.toBe(false);
      expect(within.wasm).toEqual(within.js);
    }
  });

  it('gives the JavaScript\'s walk whichever step the kernels\' grid of scaled values was last made at (by a floor, or by the walk itself)', () => {
    const values = block('annual-precip.json', 40, 100, 24, 40);
    const holed = values.map((v, c) => (c % 7 === 3 ? -999 : v));
    for (const t of [prepareTile(holed, 24, 40, 'f32', fillWords(-999, 'f32'), 5), prepareTile(Float64Array.from(values), 24, 40, 'f64', null, 5)]) {
      const base = new Float64Array(t.m * t.n).fill(t.center);
      const walks = RdoWalks.open(t.orig, base, t.classes.codes, t.m, t.n, bitsTable(), blendWeights());
      expect(walks).not.toBeNull();
      try {
        for (const kind of KINDS) {
          const floor = RowFloor.of(t.orig, base, t.classes.codes, t.m, t.n, 2.5, kind);
          const dJs = new Int32Array(t.m * t.n);
          const run = new RdoWalk(t.orig, base, t.classes.codes, dJs, 2.5, 0.3);
          expect(run.run(new Int32Array(t.m * t.n), t.m, t.n, kind, Infinity, Infinity, floor)).toBe(true);
          // The grid made by a floor at another step, then by the walk at 2.5 (no floor), then kept for a second walk.
          walks!.floor(0.7, kind);
          for (let again = 0; again < 2; again++) {
            const r = walks!.walk(kind, 2.5, 0.3, Infinity, Infinity, FLOOR_KEEP, floor);
            const dK = new Int32Array(t.m * t.n);
            if (r) walks!.differences(dK);
            expect(r, `kind ${kind} ${t.dtype}`).toEqual({ se: run.se, bits: run.bits });
            expect(Array.from(dK)).toEqual(Array.from(dJs));
          }
        }
      } finally {
        walks!.close();
      }
    }
  });

  it('gives the JavaScript\'s rough bits for differences past the table (Math.log2, imported)', () => {
    // Rows rising by 5 x 10^5 plus noise of up to 10^6, at steps of about 1: differences of about 10^5.
    const m = 12;
    const n = 16;
    const rand = mulberry32(11);
    const noisy = Float64Array.from({ length: m * n }, (_v, c) => Math.floor(c / n) * 5e5 + rand() * 1e6);
    const t = prepareTile(noisy, m, n, 'f64', null, 1);
    for (const kind of KINDS) {
      const { js, wasm } = walkBoth(t, kind, 1.1, 0.45, Infinity, Infinity);
      expect(js).not.toBe(false);
      expect((js as { bits: number }).bits / (m * n)).toBeGreaterThan(3 + 2 * Math.log2(4096) - 8);
      expect(wasm).toEqual(js);
    }
  });

  it('gives the JavaScript\'s sums and differences with missing cells (their codes the predictions), and on 1 x n, m x 1 and 1 x 1 tiles', () => {
    const values = block('annual-precip.json', 40, 100, 24, 40);
    const holed = values.map((v, c) => (c % 5 === 2 ? -999 : v));
    holed[11] = Number.NaN;
    const masked = prepareTile(holed, 24, 40, 'f32', fillWords(-999, 'f32'), 5);
    expect(masked.classes.special).toBeGreaterThan(0);
    const shapes = [prepareTile(values.subarray(0, 40), 1, 40, 'f32', null, 5), prepareTile(Float32Array.from({ length: 24 }, (_v, i) => values[i * 40 + 7]), 24, 1, 'f32', null, 5), prepareTile(values.subarray(5, 6), 1, 1, 'f32', null, 5)];
    for (const t of [masked, ...shapes]) {
      for (const kind of KINDS) {
        const { js, wasm } = walkBoth(t, kind, 2.5, 0.3, Infinity, Infinity);
        expect(wasm, `${t.m} x ${t.n} kind ${kind}`).toEqual(js);
      }
    }
  });
});

describe('walks of several weights in one pass (RdoWalks.walkLanes: kernels/rdo-lanes.ts, and kernels/rdo-blend.ts for the blend)', () => {
  /**
   * Each lane against the JavaScript's walk of its weight alone (RdoWalk.run
   * over RowFloor.of's sums): its sums and differences, and under a limit L
   * on the rough bits (the pass's own at most) the walk ends within L
   * exactly when the lane's largest sums with the floor's stay within the
   * limits, as the search reads them (src/codec/rdo.ts).
   */
  function lanesAgainstJs(t: PreparedTile, kind: number | number[], step: number, ws: number[], seLimit: number, passLimit: number, limits: number[]) {
    const cells = t.m * t.n;
    const base = new Float64Array(cells).fill(t.center);
    const kinds = typeof kind === 'number' ? ws.map(() => kind) : kind;
    // Predictors that differ share the floor of any predictor (as the search's walks of the other predictors do).
    const own = RowFloor.of(t.orig, base, t.classes.codes, t.m, t.n, step, kinds[0]);
    const floor = kinds.every((k) => k === kinds[0]) ? own : own.anyPredictor();
    const walks = RdoWalks.open(t.orig, base, t.classes.codes, t.m, t.n, bitsTable(), blendWeights(), ws.length, kinds[0] === Predictor.Blend);
    expect(walks?.lanes).toBe(ws.length);
    try {
      const lanes = walks!.walkLanes(kinds, step, ws, seLimit, passLimit, FLOOR_KEEP, floor);
      ws.forEach((w, l) => {
        const lane = lanes[l];
        const dK = new Int32Array(cells);
        if (lane) walks!.differences(dK, l);
        for (const bitsLimit of limits.filter((l) => l <= passLimit)) {
          const dJs = new Int32Array(cells);
          const run = new RdoWalk(t.orig, base, t.classes.codes, dJs, step, w);
          const ok = run.run(new Int32Array(cells), t.m, t.n, kinds[l], seLimit, bitsLimit, floor);
          const read = lane !== null && lane !== false && lane.seFloor <= seLimit && lane.bitsFloor <= bitsLimit;
          expect(read, `kind ${kind} weight ${w} limit ${bitsLimit}`).toBe(ok);
          if (!ok || !lane) continue;
          expect({ se: lane.se, bits: lane.bits }).toEqual({ se: run.se, bits: run.bits });
          expect(Array.from(dK)).toEqual(Array.from(dJs));
        }
      });
      return lanes;
    } finally {
      walks!.close();
    }
  }

  it('gives each weight\'s walk, and where it would have stopped under a tighter limit, on vega-datasets volcano.json and annual-precip.json', () => {
    const g = vega('volcano.json');
    const volcano = prepareTile(Float32Array.from(g.values as number[]), g.m, g.n, 'f32', null, 1);
    const precip = prepareTile(block('annual-precip.json', 0, 0, 48, 80), 48, 80, 'f32', null, 5);
    const ws = [0.6, 0.45, 0.3, 0.15];
    for (const t of [volcano, precip]) {
      for (const kind of KINDS) {
        const free = lanesAgainstJs(t, kind, 0.7, ws, Infinity, Infinity, [Infinity]);
        const bits = free.map((lane) => (lane ? lane.bits : 0));
        const se = free.map((lane) => (lane ? lane.se : 0));
        expect(bits.every((b) => b > 0)).toBe(true);
        // Limits around each lane's bits (and a pass limit between them), and a squared-error limit that stops some lanes.
        const around = bits.flatMap((b) => [b, b * (1 - 1e-12), 0.5 * b]);
        lanesAgainstJs(t, kind, 0.7, ws, Infinity, Math.max(...bits) * (1 - 1e-9), around);
        lanesAgainstJs(t, kind, 0.7, ws, (se[1] + se[2]) / 2, Infinity, around);
      }
      // Lanes of different predictors at one weight (the search's Lorenzo and median), under limits around their bits.
      const mixed = lanesAgainstJs(t, [Predictor.Lorenzo, Predictor.Median, Predictor.None], 0.7, [0.3, 0.3, 0.3], Infinity, Infinity, [Infinity]);
      const around = mixed.flatMap((lane) => (lane ? [lane.bits, lane.bits * (1 - 1e-12)] : []));
      expect(around.length).toBe(6);
      lanesAgainstJs(t, [Predictor.Lorenzo, Predictor.Median, Predictor.None], 0.7, [0.3, 0.3, 0.3], Infinity, Infinity, around);
    }
  });

  it('gives each weight\'s walk with missing cells, with two lanes and one, and on 1 x n, m x 1 and 1 x 1 tiles', () => {
    const values = block('annual-precip.json', 40, 100, 24, 40);
    const holed = values.map((v, c) => (c % 5 === 2 ? -999 : v));
    const masked = prepareTile(holed, 24, 40, 'f32', fillWords(-999, 'f32'), 5);
    expect(masked.classes.special).toBeGreaterThan(0);
    const shapes = [prepareTile(values.subarray(0, 40), 1, 40, 'f32', null, 5), prepareTile(Float32Array.from({ length: 24 }, (_v, i) => values[i * 40 + 7]), 24, 1, 'f32', null, 5), prepareTile(values.subarray(5, 6), 1, 1, 'f32', null, 5)];
    for (const t of [masked, ...shapes]) {
      for (const kind of [Predictor.None, Predictor.Lorenzo, Predictor.Median, Predictor.Blend]) {
        for (const ws of [[0.6, 0.45, 0.3], [0.3, 0.15], [0.45]]) lanesAgainstJs(t, kind, 2.5, ws, Infinity, Infinity, [Infinity]);
      }
    }
  });

  it('lays out as many lanes as keep the kernels\' memory within KEEP_BYTES', () => {
    const cells = 1024 * 1024;
    const walks = RdoWalks.open(new Float32Array(cells), new Float64Array(cells), new Uint8Array(cells), 1024, 1024, bitsTable(), blendWeights(), 4);
    try {
      // (21 + 4 x lanes) bytes a cell: 3 lanes would take 34.6 MB, past 32 MiB.
      expect(walks?.lanes).toBe(2);
    } finally {
      walks?.close();
    }
    // The blend's lanes each with a grid of codes, (17 + 8 x lanes) bytes a cell: one lane.
    const blend = RdoWalks.open(new Float32Array(cells), new Float64Array(cells), new Uint8Array(cells), 1024, 1024, bitsTable(), blendWeights(), 4, true);
    try {
      expect(blend?.lanes).toBe(1);
    } finally {
      blend?.close();
    }
  });
});

/**
 * The squared error and rough bits a walk of predictor `kind` adds from each
 * row to its end (entry m 0), by RdoWalk.settle (the JavaScript's choice of
 * each code) over walkPredictor, with no limits; null where the walk leaves
 * the code range.
 */
function walkedRows(t: PreparedTile, kind: number, step: number, w: number, base: Float64Array) {
  const { m, n } = t;
  const run = new RdoWalk(t.orig, base, t.classes.codes, new Int32Array(m * n), step, w);
  const se = new Float64Array(m + 1);
  const bits = new Float64Array(m + 1);
  const ok = walkPredictor(new Int32Array(m * n), m, n, kind, (c, p) => {
    const v = run.settle(c, p);
    if (c % n === n - 1) [se[(c + 1) / n], bits[(c + 1) / n]] = [run.se, run.bits];
    return v;
  });
  if (!ok) return null;
  // After row i - 1, then from row i to the end.
  return { se: Array.from(se, (v) => run.se - v), bits: Array.from(bits, (v) => run.bits - v) };
}

describe('the walks\' floor (RowFloor)', () => {
  /** Blocks of vega-datasets volcano.json and annual-precip.json: whole, with missing cells, binary64, one row, one column. */
  function tiles(): PreparedTile[] {
    const g = vega('volcano.json');
    const values = block('annual-precip.json', 40, 100, 24, 40);
    const holed = values.map((v, c) => (c % 5 === 2 || (c >= 200 && c < 260) ? -999 : v));
    return [
      prepareTile(Float32Array.from(g.values as number[]), g.m, g.n, 'f32', null, 1),
      prepareTile(holed, 24, 40, 'f32', fillWords(-999, 'f32'), 5),
      prepareTile(Float64Array.from(values), 24, 40, 'f64', null, 5),
      prepareTile(values.subarray(0, 40), 1, 40, 'f32', null, 5),
      prepareTile(Float32Array.from({ length: 24 }, (_v, i) => values[i * 40 + 7]), 24, 1, 'f32', null, 5),
    ];
  }

  it('is at most what a walk adds from each row to its end, for every predictor and weight (the search\'s cuts are then the same)', () => {
    for (const t of tiles()) {
      const base = new Float64Array(t.m * t.n).fill(t.center);
      for (const step of [0.3, 2.5]) {
        for (const kind of KINDS) {
          const floor = RowFloor.of(t.orig, base, t.classes.codes, t.m, t.n, step, kind);
          for (const w of [0.15, 0.6]) {
            const rows = walkedRows(t, kind, step, w, base);
            expect(rows).not.toBeNull();
            for (let i = 0; i <= t.m; i++) {
              const at = `${t.m} x ${t.n} kind ${kind} step ${step} w ${w} row ${i}`;
              // Within rounding of the sums (about 2^-53 of them a term; FLOOR_KEEP takes 10^-6 off).
              expect(floor.restSe[i], at).toBeLessThanOrEqual(rows!.se[i] * (1 + 1e-12) + 1e-300);
              expect(floor.restBits[i], at).toBeLessThanOrEqual(rows!.bits[i] * (1 + 1e-12));
              expect(floor.restBits[i], at).toBeGreaterThanOrEqual(floor.restValid[i]);
            }
          }
        }
      }
    }
  });

  it('is at most what a walk adds on small random tiles, cell by cell in effect (a property: a few cells leave a wrong interval no slack to hide in)', () => {
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 4 }), fc.integer({ min: 1, max: 4 }), fc.integer({ min: 1, max: 2 ** 31 }), fc.constantFrom(0.15, 0.3, 0.45, 0.6), (m, n, seed, w) => {
        const rand = mulberry32(seed);
        // Codes of up to 1, 4 or 40 either way at step 1 (the nearest code is left most often where differences are
        // small), a third of the cells missing in some tiles.
        const holes = rand() < 0.5;
        const span = [2, 8, 80][Math.floor(rand() * 3)];
        const values = Float64Array.from({ length: m * n }, () => (holes && rand() < 0.3 ? -999 : Math.round((rand() - 0.5) * span) + (rand() - 0.5)));
        const t = prepareTile(values, m, n, 'f64', fillWords(-999, 'f64'), 1);
        const base = new Float64Array(m * n);
        for (const kind of KINDS) {
          const floor = RowFloor.of(t.orig, base, t.classes.codes, m, n, 1, kind);
          const rows = walkedRows(t, kind, 1, w, base);
          for (let i = 0; i <= m; i++) expect(floor.restBits[i]).toBeLessThanOrEqual(rows!.bits[i] * (1 + 1e-12));
          // The kernel's floor is the JavaScript's.
          const walks = RdoWalks.open(t.orig, base, t.classes.codes, m, n, bitsTable(), blendWeights());
          try {
            const sums = walks!.floor(1, kind);
            expect([sums.restSe, sums.restBits, sums.restValid].map((a) => Array.from(a))).toEqual([floor.restSe, floor.restBits, floor.restValid].map((a) => Array.from(a)));
          } finally {
            walks!.close();
          }
        }
      }),
      { numRuns: 400, seed: 10 },
    );
  });

  it('cuts a walk of a plain predictor short at its first row where the bits cannot fit, and lets a walk end that meets its limit exactly, on both paths', () => {
    const g = vega('volcano.json');
    const t = prepareTile(Float32Array.from(g.values as number[]), g.m, g.n, 'f32', null, 1);
    const base = new Float64Array(t.m * t.n).fill(t.center);
    for (const kind of KINDS.filter((k) => k !== Predictor.Blend && k !== Predictor.None)) {
      const whole = walkBoth(t, kind, 0.2, 0.3, Infinity, Infinity);
      const { bits } = whole.js as { bits: number };
      const floor = RowFloor.of(t.orig, base, t.classes.codes, t.m, t.n, 0.2, kind);
      // At a fine step (differences of tens of codes) the floor is well above 1 bit a cell.
      expect(floor.restBits[0]).toBeGreaterThan(2 * floor.restValid[0]);
      // A limit between 1 bit a valid cell and the floor: the walk stops before its first row; one between the floor
      // and the bits: it stops later; both false on both paths.
      const below = 0.5 * (floor.restValid[0] + floor.restBits[0]);
      expect(floor.cannotFit(0, 0, 0, Infinity, below)).toBe(true);
      expect(floor.anyPredictor().cannotFit(0, 0, 0, Infinity, below)).toBe(false);
      const above = 0.5 * (floor.restBits[0] + bits);
      expect(floor.cannotFit(0, 0, 0, Infinity, above)).toBe(false);
      for (const limit of [below, above]) {
        const cut = walkBoth(t, kind, 0.2, 0.3, Infinity, limit);
        expect(cut.js).toBe(false);
        expect(cut.wasm).toBe(false);
      }
      const exact = walkBoth(t, kind, 0.2, 0.3, Infinity, bits);
      expect(exact.js).toEqual(whole.js);
      expect(exact.wasm).toEqual(whole.js);
    }
  });
});

describe('the rate-distortion search in the kernels', () => {
  it('gives the JavaScript\'s payloads on blocks of vega-datasets annual-precip.json, at rank 0 and with factors, at three PSNR bounds', { timeout: 30_000 }, () => {
    // Rows 40.. of the tropics and mid-latitudes (no missing cell), and rows 0.. over the Arctic (land and sea: some missing).
    for (const [i0, j0, m, n] of [
      [40, 100, 64, 96],
      [0, 0, 48, 80],
    ]) {
      const values = block('annual-precip.json', i0, j0, m, n);
      for (const db of [40, 60, 80]) {
        const tol = psnrTol(values, db);
        const t = prepareTile(values, m, n, 'f32', null, tol);
        for (const rank of [0, 3]) {
          const { js, wasm } = bothPayloads(t, tol, rank);
          expect(wasm, `rows ${i0}.. psnr ${db} rank ${rank}`).toEqual(js);
          if (rank === 0) expect(js).not.toBeNull();
        }
      }
    }
  });

  it('gives the JavaScript\'s payloads on vega-datasets volcano.json, binary32 and binary64, and with a cap the search gives up against', () => {
    const g = vega('volcano.json');
    for (const dtype of ['f32', 'f64'] as const) {
      const values = dtype === 'f32' ? Float32Array.from(g.values as number[]) : Float64Array.from(g.values as number[]);
      const tol = psnrTol(values, 60);
      const t = prepareTile(values, g.m, g.n, dtype, null, tol);
      const { js, wasm } = bothPayloads(t, tol, 0);
      expect(js).not.toBeNull();
      expect(wasm).toEqual(js);
      // A cap a little below the payload: the walks and codings are cut short on both paths alike.
      const capped = bothPayloads(t, tol, 0, Math.floor(0.9 * js!.length));
      expect(capped.wasm).toEqual(capped.js);
    }
  });

  it('gives the JavaScript\'s payloads on 1 x n, m x 1 and 1 x 1 tiles, with missing cells, and with a field layer\'s term', () => {
    const values = block('annual-precip.json', 40, 100, 24, 40);
    const cases: [Float32Array, number, number][] = [
      [values.subarray(0, 40), 1, 40],
      [Float32Array.from({ length: 24 }, (_v, i) => values[i * 40 + 7]), 24, 1],
      [values.subarray(5, 6), 1, 1],
    ];
    // Every fifth cell the fill value (-999, a missing cell), and a NaN.
    const holed = values.map((v, c) => (c % 5 === 2 ? -999 : v));
    holed[11] = Number.NaN;
    for (const [v, m, n] of cases) {
      const tol = psnrTol(v, 50) || 1;
      const t = prepareTile(v, m, n, 'f32', null, tol);
      const { js, wasm } = bothPayloads(t, tol, 0);
      expect(wasm, `${m} x ${n}`).toEqual(js);
    }
    const tol = psnrTol(values, 50);
    const masked = prepareTile(holed, 24, 40, 'f32', fillWords(-999, 'f32'), tol);
    expect(masked.classes.special).toBeGreaterThan(0);
    for (const rank of [0, 2]) {
      const { js, wasm } = bothPayloads(masked, tol, rank);
      expect(js).not.toBeNull();
      expect(wasm, `masked, rank ${rank}`).toEqual(js);
    }
    // A layer's term: a smooth ramp the tile's values are coded against.
    const layer = Float64Array.from({ length: 24 * 40 }, (_v, c) => 0.5 * values[c] + 0.01 * (c % 40));
    const layered = prepareTile(values, 24, 40, 'f32', null, tol, 'one', layer);
    const { js, wasm } = bothPayloads(layered, tol, 0);
    expect(js).not.toBeNull();
    expect(wasm).toEqual(js);
  });

  it('gives the JavaScript\'s payloads where differences pass the rough-bits table, and where codes pass the limit', () => {
    // Rows rising by 5 x 10^5 plus noise of up to 10^6, at an RMSE limit of 1: the plain predictor is Left, and its
    // differences, Lorenzo's and the median's are of about 10^5 steps (their rough bits from Math.log2).
    const m = 12;
    const n = 16;
    const rand = mulberry32(7);
    const noisy = Float64Array.from({ length: m * n }, (_v, c) => Math.floor(c / n) * 5e5 + rand() * 1e6);
    const t = prepareTile(noisy, m, n, 'f64', null, 1);
    const { js, wasm } = bothPayloads(t, 1, 0);
    expect(js).not.toBeNull();
    expect(wasm).toEqual(js);
    // Values near 10^300 at an RMSE limit of 10^-3: codes far past 2^30, every walk fails on both paths.
    const huge = Float64Array.from({ length: m * n }, (_v, c) => (c % 3 === 0 ? 1e300 : -1e300));
    const h = prepareTile(huge, m, n, 'f64', null, 1e-3);
    const big = bothPayloads(h, 1e-3, 0);
    expect(big.wasm).toEqual(big.js);
  });

  it('gives the JavaScript\'s payloads on small random tiles (a property)', () => {
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 12 }), fc.integer({ min: 1, max: 12 }), fc.integer({ min: 1, max: 2 ** 31 }), fc.double({ min: 20, max: 90, noNaN: true }), (m, n, seed, db) => {
        const rand = mulberry32(seed);
        // A smooth ramp plus noise, in binary32.
        const values = Float32Array.from({ length: m * n }, (_v, c) => 10 * Math.floor(c / n) + (c % n) + rand() * 3);
        const tol = psnrTol(values, db) || 1;
        const t = prepareTile(values, m, n, 'f32', null, tol);
        const { js, wasm } = bothPayloads(t, tol, 0);
        expect(wasm).toEqual(js);
      }),
      { numRuns: 60, seed: 72 },
    );
  });
});
