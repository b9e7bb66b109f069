/**
 * The L2 plan (src/codec/plan-l2.ts): what it keeps of the first pass, and
 * the field-wide Eckart-Young cut made by merging the tiles' spectra.
 *
 * Eckart-Young (Eckart and Young, Psychometrika 1, 1936; from memory): the
 * squared Frobenius error of the best rank-r approximation is the sum of the
 * squares of the discarded singular values, so a shared budget of squared
 * error is spent best by discarding the field-wide smallest values first.
 * The greedy rule stated in the reference below (visit every value in
 * ascending order, cut while it fits, close a tile whose next value does
 * not fit) is common practice, no source.
 */
import { Matrix, SingularValueDecomposition } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { candidatePlans, costPlans, costPlansAsync, costTile, eckartYoungPlans, encodeWith, factorBytes, keepCosted, l2Plan, planL2, readTiles } from '../../src/codec/plan-l2.js';
import { cuttable, firstPass, keepsTiles, leadingSpectrum, sampleTiles, SvdHandoff, tileSpectrum } from '../../src/codec/first-pass.js';
import { gramSingularValues } from '../../src/linalg/spectrum.js';
import { prepareTile } from '../../src/codec/prepare.js';
import { Spectra } from '../../src/codec/spectra.js';
import { memoryBands, type FieldSpec } from '../../src/codec/tiles.js';
import { encodeField, fieldBasis } from '../../src/codec/field.js';
import { encodeTasks, encodeWithChoices } from '../../src/parallel/encode.js';
import { WorkerPool } from '../../src/parallel/pool.js';
import { mulberry32 } from '../rng.js';

/** The cut for one share, stated directly: every value of every tile in one sorted list. */
function referenceCut(spectra: number[][], budget: number, share: number): { total: number; cut: number[]; ranks: number[] } {
  const order: [number, number, number][] = [];
  spectra.forEach((s, t) => {
    let key = 0;
    for (let k = s.length - 1; k >= 0; k--) {
      key = Math.max(key, s[k]);
      order.push([key, t, s[k]]);
    }
  });
  // Array.prototype.sort is stable (ECMAScript 2019; from memory): equal keys of one tile keep their order.
  order.sort((a, b) => a[0] - b[0] || a[1] - b[1]);
  const cut = spectra.map(() => 0);
  const ranks = spectra.map((s) => s.length);
  const closed = spectra.map(() => false);
  let total = 0;
  for (const [, t, v2] of order) {
    if (closed[t]) continue;
    if (!(total + v2 <= share * budget)) {
      closed[t] = true;
      continue;
    }
    total += v2;
    cut[t] += v2;
    ranks[t] -= 1;
  }
  return { total, cut, ranks };
}

/** A store holding these spectra, every tile 8 x 8 with all cells valid. */
function store(spectra: number[][]): Spectra {
  const s = new Spectra(spectra.length);
  for (const v of spectra) s.add({ sv2: Float64Array.from(v), dims: [8, 8, 64] });
  return s;
}

/** Random spectra drawn from a few values, so that many values tie within and across tiles. */
function spectraOf(seed: number, tiles: number, descending: boolean): number[][] {
  const rnd = mulberry32(seed);
  const levels = [0, 0.25, 0.5, 1, 2, 3, 50, 1e4];
  return Array.from({ length: tiles }, () => {
    const k = Math.floor(rnd() * 9); // 0..8 values; 0 stands for a tile with no usable values
    const v = Array.from({ length: k }, () => levels[Math.floor(rnd() * levels.length)]);
    return descending ? v.sort((a, b) => b - a) : v;
  });
}

describe('cuttable (what a spectra piece holds of a tile)', () => {
  it('leaves out only values no cut reaches: the plans from the held tails are the plans from the whole spectra', () => {
    for (let seed = 1; seed <= 40; seed++) {
      // Descending spectra (as the SVD gives them) of 8 x 8 tiles whose cells are all valid: the budget is the cells.
      const sp = spectraOf(seed, 1 + (seed % 17) * 5, true);
      const cells = 64 * sp.length;
      const trimmed = new Spectra(sp.length);
      let held = 0;
      for (const v of sp) {
        const tail = cuttable(Float64Array.from(v), cells);
        held += tail.length;
        trimmed.add({ sv2: tail, dims: [8, 8, 64] }, v.length);
      }
      const whole = eckartYoungPlans(store(sp), cells, [0.3, 0.5, 0.8], 0.5);
      const fromTails = eckartYoungPlans(trimmed, cells, [0.3, 0.5, 0.8], 0.5);
      expect(fromTails, `seed ${seed}`).toEqual(whole);
      // The reference rule above cuts nothing beyond the held tails.
      const ref = referenceCut(sp, cells, 0.8);
      ref.ranks.forEach((r, t) => expect(r).toBeGreaterThanOrEqual(sp[t].length - trimmed.length[t]));
      if (seed === 40) expect(held).toBeLessThan(sp.flat().length); // some values are left out, so the check has teeth
    }
  });
});

describe('eckartYoungPlans', () => {
  const shares = [0.3, 0.5, 0.8];
  for (const [label, descending] of [
    ['descending spectra, as the SVD gives them', true],
    ['spectra out of order (keys are then running maxima)', false],
  ] as const) {
    it(`cuts exactly the values the sorted-list rule cuts, with the same sums: ${label}`, () => {
      for (let seed = 1; seed <= 40; seed++) {
        const sp = spectraOf(seed, 1 + (seed % 17) * 5, descending);
        const budget = 4 + (seed % 7) * 9;
        const tol = 0.5;
        const plans = eckartYoungPlans(store(sp), budget, shares, tol);
        shares.forEach((share, i) => {
          const ref = referenceCut(sp, budget, share);
          const p = plans[i];
          if (p === null) return;
          expect(Array.from(p.ranks), `seed ${seed} share ${share}`).toEqual(ref.ranks);
          // The steps follow from the total cut (summed in the same order, so bit for bit) and the ranks.
          const q = (budget - ref.total) * 0.9;
          let sumRN = 0;
          for (const r of ref.ranks) sumRN += r * 8;
          expect(p.dw).toBe(sumRN > 0 ? tol * Math.sqrt((6 * q) / sumRN) : tol);
          // Allotments add up to a hair inside the budget (0.999 of it), and a tile with more cut gets no less.
          const sum = p.allot.reduce((a, b) => a + b, 0);
          expect(sum).toBeLessThanOrEqual(budget);
          expect(sum).toBeCloseTo(0.999 * budget, 9);
          for (let t = 1; t < sp.length; t++) if (ref.ranks[t] === ref.ranks[t - 1] && ref.cut[t] > ref.cut[t - 1]) expect(p.allot[t]).toBeGreaterThan(p.allot[t - 1]);
        });
      }
    });
  }
});

describe('Spectra (what the planner keeps of the first pass)', () => {
  it('holds 8 bytes per singular value and six 32-bit numbers per tile, and no tile data', () => {
    const tiles = 5000;
    const s = new Spectra(tiles);
    const sv2 = Float64Array.from({ length: 64 }, (_, k) => 64 - k);
    for (let t = 0; t < tiles; t++) s.add({ sv2, dims: [64, 64, 4096] });
    const values = tiles * 64;
    // The values fill whole chunks of 2^20 (8 MiB), so the store is at most one chunk above the values themselves.
    expect(s.bytes).toBeGreaterThanOrEqual(8 * values + 24 * tiles);
    expect(s.bytes).toBeLessThanOrEqual(8 * values + 24 * tiles + 8 * (1 << 20));
    // Against the float32 tiles it summarises (64 x 64 x 4 bytes each): about 30 times less.
    expect(8 * values + 24 * tiles).toBeLessThan((tiles * 64 * 64 * 4) / 30);
    expect(Array.from(s.values(4321))).toEqual(Array.from(sv2));
    expect(() => s.add({ sv2, dims: [64, 64, 4096] })).toThrow(/more than the 5000 tiles/);
  });

  it('holds a small field in a store of its size, and keeps every tile\'s values when later tiles are longer than the first', () => {
    // One tile of 61 values (vega-datasets volcano.json is 61 x 87): 8 bytes a value and 28 for the tile, not a chunk of 8 MiB.
    const one = new Spectra(1);
    one.add({ sv2: Float64Array.from({ length: 61 }, (_, k) => 61 - k), dims: [61, 87, 61 * 87] });
    expect(one.bytes).toBe(8 * 61 + 28);
    // Three tiles: 10 values, then 40 (past the room the first left for three of 10), then 5.
    const s = new Spectra(3);
    const spectra = [10, 40, 5].map((len, t) => Float64Array.from({ length: len }, (_, k) => 100 * (t + 1) - k));
    spectra.forEach((sv2, t) => s.add({ sv2, dims: [sv2.length, 64, 64 * sv2.length - t] }));
    spectra.forEach((sv2, t) => expect(Array.from(s.values(t))).toEqual(Array.from(sv2)));
    expect(Array.from(s.valid)).toEqual([640, 2559, 318]);
  });

  it('keeps prepared tiles only for small fields; a larger field is planned from spectra and sampled tiles alone', () => {
    const rows = 2050;
    const cols = 2050; // 4.2 M cells: past the 4 M cells whose prepared tiles are kept
    expect(keepsTiles({ rows: 2048, cols: 2048 })).toBe(true);
    expect(keepsTiles({ rows, cols })).toBe(false);
    // A field of 4 x 4 tiles of 2 x 2 cells, planned with the spectra store of its first pass.
    const spec: FieldSpec = { name: 'f', dtype: 'f64', rows: 8, cols: 8, tileRows: 2, tileCols: 2, bound: { mode: 'psnr', value: 30 }, fill: null };
    const rnd = mulberry32(7);
    const values = Float64Array.from({ length: 64 }, (_, k) => Math.sin(k / 5) + 0.1 * rnd());
    const src = memoryBands(values, 8);
    const first = firstPass(src, spec, 0.05, null);
    expect(first.spectra.count).toBe(16);
    expect(first.spectra.length.every((k) => k === 2)).toBe(true);
    const plan = planL2(src, spec, 0.05, null, first);
    // The plan keeps per tile one allotment (and, for a rank plan, one rank): nothing that grows with the tile.
    expect(plan.data.allot.length).toBe(16);
    expect(plan.data.ranks.length === 16 || plan.data.ranks.length === 0).toBe(true);
  });
});

describe('tileSpectrum (singular values the tile trial took, used again)', () => {
  it('takes known values for a tile without missing cells at any tolerance, and recomputes a tile whose filling depends on it', () => {
    const rand = mulberry32(7);
    const values = Float32Array.from({ length: 24 * 16 }, (_, c) => Math.sin(c / 7) + 0.1 * rand());
    const own = tileSpectrum(prepareTile(values, 24, 16, 'f32', null, 0.01), 0.01);
    const marker = Float64Array.from(own, (v) => v + 1);
    // Centring does not depend on the tolerance: the values computed at one serve at another.
    expect(tileSpectrum(prepareTile(values, 24, 16, 'f32', null, 0.5), 0.5, marker)).toBe(marker);
    expect(Array.from(tileSpectrum(prepareTile(values, 24, 16, 'f32', null, 0.5), 0.5))).toEqual(Array.from(own));
    // A missing cell is filled by a low-rank fill that depends on the tolerance: computed afresh.
    const holed = Float32Array.from(values);
    holed[30] = Number.NaN;
    const again = tileSpectrum(prepareTile(holed, 24, 16, 'f32', null, 0.5), 0.5, marker);
    expect(again).not.toBe(marker);
    expect(again.length).toBe(16);
  });
});

describe('leadingSpectrum (leading singular values and a lumped tail)', () => {
  /** A smooth 256 x 288 tile: samples of 1 / (1 + x + y), whose singular values fall off geometrically. */
  const [m, n] = [256, 288];
  const smooth = Float32Array.from({ length: m * n }, (_, c) => 1 / (1 + Math.floor(c / n) / m + (c % n) / n) + 1e-3 * Math.sin(c));

  // The smallest tile that takes this path (256 on its shorter side): ml-matrix's SVD of it takes about a second.
  it('gives the leading values of ml-matrix\'s SVD and a tail whose squares make up the Frobenius norm', () => {
    const tol = 1e-3;
    const t = prepareTile(smooth, m, n, 'f32', null, tol);
    const s = leadingSpectrum(t, tol);
    expect(s).not.toBeNull();
    // Reference library: ml-matrix's SVD (Golub-Kahan-Reinsch, after JAMA) of the same centred values.
    const rows = Array.from({ length: m }, (_, i) => Array.from(t.centred.subarray(i * n, (i + 1) * n)));
    const ref = new SingularValueDecomposition(new Matrix(rows), { autoTranspose: true }).diagonal;
    expect(s!.length).toBe(m);
    // The leading values, where they stand well above the tail, to 1e-9 relative.
    for (let j = 0; j < 6; j++) expect(Math.abs(s![j] - ref[j])).toBeLessThanOrEqual(1e-9 * ref[j]);
    // ||A||_F^2 = sum of squared singular values (Golub and Van Loan, "Matrix Computations", 2.5.3; from memory).
    const frob2 = t.centred.reduce((a, x) => a + x * x, 0);
    const sum2 = s!.reduce((a, x) => a + x * x, 0);
    expect(Math.abs(sum2 - frob2)).toBeLessThanOrEqual(1e-9 * frob2);
    // Descending, and the lumped tail within the share of the tile's budget it may hold.
    for (let j = 1; j < s!.length; j++) expect(s![j]).toBeLessThanOrEqual(s![j - 1]);
    const k = s!.findIndex((v, j) => j > 0 && v === s![s!.length - 1]);
    const refTail = ref.slice(k).reduce((a, x) => a + x * x, 0);
    expect((s!.length - k) * s![k] ** 2).toBeLessThanOrEqual(1e-3 * t.valid * tol * tol);
    expect(Math.abs((s!.length - k) * s![k] ** 2 - refTail)).toBeLessThanOrEqual(1e-9 * frob2);
  });

  it('leaves the plans of a field of such tiles as the whole spectra make them', () => {
    // Eckart-Young cut (see the head of this file) from the leading values and from every value (Gram eigenvalues, tested against ml-matrix in test/linalg).
    const tol = 2e-4;
    const tiles = [0, 1, 2].map((k) => prepareTile(Float32Array.from(smooth, (v, c) => v * (1 + 0.3 * k) + 1e-4 * k * Math.cos(c / 5)), m, n, 'f32', null, tol));
    const plans = (spectrum: (t: (typeof tiles)[number]) => Float64Array) => {
      const spectra = new Spectra(tiles.length);
      for (const t of tiles) spectra.add({ sv2: spectrum(t).map((v) => (v / tol) ** 2), dims: [m, n, t.valid] });
      return eckartYoungPlans(spectra, tiles.length * m * n, [0.3, 0.5, 0.8], tol);
    };
    const lead = plans((t) => leadingSpectrum(t, tol)!);
    const whole = plans((t) => gramSingularValues(t.centred, m, n));
    for (const [i, p] of lead.entries()) {
      expect(Array.from(p!.ranks)).toEqual(Array.from(whole[i]!.ranks));
      // The steps from the cut totals, equal to the rounding of the tails (about 1e-8 relative here).
      expect(Math.abs(p!.dw - whole[i]!.dw)).toBeLessThanOrEqual(1e-6 * whole[i]!.dw);
      expect(Math.abs(p!.c - whole[i]!.c)).toBeLessThanOrEqual(1e-6 * whole[i]!.c);
    }
  });

  it('takes no lumped tail where the spectrum is flat (noise), nor for a tile below 256 on a side', () => {
    const rnd = mulberry32(3);
    const noise = Float32Array.from({ length: m * n }, () => rnd());
    expect(leadingSpectrum(prepareTile(noise, m, n, 'f32', null, 1e-2), 1e-2)).toBeNull();
    expect(leadingSpectrum(prepareTile(smooth.subarray(0, 128 * n), 128, n, 'f32', null, 1e-3), 1e-3)).toBeNull();
  });
});

describe('costPlans (candidate plans costed a tile at a time, losers dropped)', () => {
  /** A block of vega-datasets 3.2.1 annual-precip.json (NOAA CFSv2 2016 annual precipitation, 360 x 168): rows 40.., columns 40.., no missing cells. */
  function precipBlock(rows: number, cols: number): Float64Array {
    const path = fileURLToPath(new URL('../../node_modules/vega-datasets/data/annual-precip.json', import.meta.url));
    const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; values: (number | null)[] };
    return Float64Array.from({ length: rows * cols }, (_, c) => g.values[(40 + Math.floor(c / cols)) * g.width + 40 + (c % cols)] ?? Number.NaN);
  }

  /**
   * The block of rows x cols in tiles of tileRows x tileCols, under an RMSE limit of range x 10^(-db / 20)
   * (PSNR = 20 log10(range / RMSE), common usage).
   */
  function precipCase(rows: number, cols: number, tileRows: number, tileCols: number, db: number): { tol: number; spec: FieldSpec; src: ReturnType<typeof memoryBands> } {
    const values = precipBlock(rows, cols);
    let [lo, hi] = [Infinity, -Infinity];
    for (const v of values) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
    const tol = (hi - lo) * 10 ** (-db / 20);
    return { tol, spec: { name: 'p', dtype: 'f64', rows, cols, tileRows, tileCols, bound: { mode: 'rmse', value: tol }, fill: null }, src: memoryBands(values, cols) };
  }

  it.each([
    ['psnr:70', 10 ** (-70 / 20)],
    ['psnr:40', 10 ** (-40 / 20)],
  ])('chooses the plan whose payloads of every tile, each plan coded in full, add up to the fewest bytes: %s', (_label, ratio) => {
    const [rows, cols, side] = [96, 128, 32];
    const values = precipBlock(rows, cols);
    expect(values.every(Number.isFinite)).toBe(true);
    let [lo, hi] = [Infinity, -Infinity];
    for (const v of values) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
    // RMSE limit range x 10^(-PSNR / 20) (PSNR = 20 log10(range / RMSE), common usage).
    const tol = (hi - lo) * ratio;
    const spec: FieldSpec = { name: 'p', dtype: 'f64', rows, cols, tileRows: side, tileCols: side, bound: { mode: 'rmse', value: tol }, fill: null };
    const src = memoryBands(values, cols);
    const plans = candidatePlans(firstPass(src, spec, tol, null).spectra, tol);
    expect(plans.length).toBeGreaterThan(1);
    const sample = Array.from({ length: 12 }, (_, k) => k);
    // At psnr:70 every rank plan codes more factor values than the tiles have cells (32 x 32 tiles: r (m + n) / (m n) = r / 16),
    // so it is not costed; at psnr:40 none does, and the losers drop out on their bytes.
    const perCell = plans.filter((p) => p.kind === 'rank').map((p) => p.ranks.reduce((a, r) => a + r, 0) / 16 / 12);
    expect(perCell.every((v) => (ratio > 1e-3 ? v < 1 : v > 1))).toBe(true);
    // The definition, stated directly on freshly prepared tiles: every plan on every tile, then the smallest total, the
    // first on a tie. The plans of a tile go in reverse order here: a payload does not depend on the SVDs an earlier plan left.
    const fresh = firstPass(src, spec, tol, null).kept;
    const totals = plans.map(() => 0);
    for (const k of sample) for (const [at, p] of [...plans.entries()].reverse()) totals[at] += encodeWith(p, fresh[k], k).length;
    const least = Math.min(...totals);
    const costed = costPlans(plans, sample, firstPass(src, spec, tol, null).kept);
    expect(costed.bytes).toBe(least);
    expect(costed.plan).toBe(plans[totals.indexOf(least)]);
  });

  it('drops a rank plan of many factor values whose estimate from the spectrum passes the cheapest by far, before computing its SVDs; the same plan as costing every plan in full', () => {
    // One 96 x 128 tile of the block at psnr:40: the residual plan takes about 1550 bytes, the rank plans of 0.3 and 0.5
    // (0.75 and 0.62 factor values a cell) about 2460 and 2280, estimated 2750 and 2600: more than 1.5 times 1550.
    const [rows, cols] = [96, 128];
    const { tol, spec, src } = precipCase(rows, cols, rows, cols, 40);
    const first = firstPass(src, spec, tol, null);
    const plans = candidatePlans(first.spectra, tol);
    const fresh = firstPass(src, spec, tol, null).kept[0];
    const totals = plans.map((p) => encodeWith(p, fresh, 0).length);
    const costed = costPlans(plans, [0], first.kept, first.spectra);
    expect(costed.bytes).toBe(Math.min(...totals));
    expect(costed.plan).toBe(plans[totals.indexOf(Math.min(...totals))]);
    const heavy = plans.filter((p) => p.kind === 'rank' && (p.ranks[0] * (rows + cols)) / (rows * cols) >= 0.5);
    expect(heavy.length).toBeGreaterThan(0);
    for (const p of heavy) {
      // The estimate is near what the plan takes on this real field (the rule's premise), and above 1.5 times the cheapest.
      const est = factorBytes(p, first.spectra.values(0), 0, rows, cols);
      const real = encodeWith(p, fresh, 0).length;
      expect(est / real).toBeGreaterThan(0.8);
      expect(est / real).toBeLessThan(1.25);
      expect(est).toBeGreaterThan(1.5 * costed.bytes);
    }
    // Dropped before its first tile: no payload of a heavy plan was made, nor the SVD of its rank (rungs 16, 32, 64, ...; see svdRung).
    expect(first.kept[0].costed.size).toBe(plans.length - heavy.length);
    expect(Math.max(...first.kept[0].svds.keys())).toBeLessThan(Math.max(...heavy.map((p) => p.ranks[0])));
  });

  it.each([0, 1, 3])('costPlansAsync, payloads made on copies of the tiles (as on other threads), %i tiles ahead: the same plan and bytes as costPlans, each plan asked once a tile, the tiles keep the payloads', async (ahead) => {
    for (const db of [40, 70]) {
      const { tol, spec, src } = precipCase(96, 128, 32, 32, db);
      const first = firstPass(src, spec, tol, null);
      const plans = candidatePlans(first.spectra, tol);
      const sample = Array.from({ length: 12 }, (_, k) => k);
      const ref = costPlans(plans, sample, firstPass(src, spec, tol, null).kept, first.spectra);
      const tiles = first.kept;
      const asked: string[] = [];
      const got = await costPlansAsync(
        plans,
        sample,
        tiles,
        async (k, ats) => {
          for (const at of ats) asked.push(`${k} ${at}`);
          const payloads = costTile(plans, ats, structuredClone(tiles[k]), sample[k]);
          payloads.forEach((payload, j) => keepCosted(plans[ats[j]], tiles[k], sample[k], payload));
          return payloads.map((payload) => payload.length);
        },
        ahead,
        first.spectra,
      );
      expect(got.bytes).toBe(ref.bytes);
      expect(plans.indexOf(got.plan)).toBe(plans.indexOf(ref.plan));
      expect(new Set(asked).size).toBe(asked.length);
      for (const k of sample) expect(tiles[k].costed.size).toBeGreaterThan(0);
    }
  });

  it('costPlansAsync: a heavy plan dropped on its estimate is never asked for; a failed request fails the costing', async () => {
    const [rows, cols] = [96, 128];
    const { tol, spec, src } = precipCase(rows, cols, rows, cols, 40);
    const first = firstPass(src, spec, tol, null);
    const plans = candidatePlans(first.spectra, tol);
    const heavy = plans.flatMap((p, at) => (p.kind === 'rank' && (p.ranks[0] * (rows + cols)) / (rows * cols) >= 0.5 ? [at] : []));
    expect(heavy.length).toBeGreaterThan(0);
    const asked: number[] = [];
    const cost = async (k: number, ats: number[]) => {
      asked.push(...ats);
      return costTile(plans, ats, first.kept[k], k).map((payload) => payload.length);
    };
    const got = await costPlansAsync(plans, [0], first.kept, cost, 1, first.spectra);
    expect(got.bytes).toBe(costPlans(plans, [0], firstPass(src, spec, tol, null).kept, first.spectra).bytes);
    expect(asked.some((at) => heavy.includes(at))).toBe(false);
    // A request that fails (a worker that died) fails the costing with its error, tiles asked ahead included.
    const twelve = precipCase(96, 128, 32, 32, 40);
    const many = firstPass(twelve.src, twelve.spec, twelve.tol, null);
    const broken = async (k: number) => {
      if (k === 3) throw new Error('worker gone');
      return candidatePlans(many.spectra, twelve.tol).map(() => 100);
    };
    await expect(costPlansAsync(candidatePlans(many.spectra, twelve.tol), Array.from({ length: 12 }, (_, k) => k), many.kept, broken, 2, many.spectra)).rejects.toThrow('worker gone');
  });

  it('estimates the bits of a quantized Gaussian as its differential entropy less log2 of the step', () => {
    // Cover and Thomas, Elements of Information Theory, theorem 8.3.1 (from memory): a variable of density f quantized
    // with a small step d has entropy near h(f) - log2 d, and a Gaussian's h is log2(sigma sqrt(2 pi e)). Checked against
    // the empirical entropy of seeded Gaussian samples (Box-Muller), quantized at sigma / 16.
    const rnd = mulberry32(11);
    const count = 1 << 17;
    const hist = new Map<number, number>();
    for (let i = 0; i < count; i++) {
      const g = Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
      const q = Math.round(g * 16);
      hist.set(q, (hist.get(q) ?? 0) + 1);
    }
    let entropy = 0;
    for (const c of hist.values()) entropy -= (c / count) * Math.log2(c / count);
    // One rank of a 1 x 1 "tile" whose singular value is 16 steps of each factor: m = n = 1, s = 16 c = 16 dw.
    const tol = 1;
    const p = { name: 'r', kind: 'rank' as const, ranks: Int32Array.of(1), c: 1 / 16, dw: 1 / 16, ePrime: 0, allot: Float64Array.of(1), tol };
    const bits = 8 * factorBytes(p, Float64Array.of(1), 0, 1, 1);
    expect(Math.abs(bits / 2 - entropy)).toBeLessThan(0.02);
  });

  it('the second pass takes the payloads the costing made of a sampled tile: the same bytes as encoding a fresh tile', () => {
    const { tol, spec, src } = precipCase(64, 96, 32, 32, 40);
    const first = firstPass(src, spec, tol, null);
    const plans = candidatePlans(first.spectra, tol);
    const sample = [0, 2, 5];
    const costed = costPlans(plans, sample, sample.map((k) => first.kept[k]));
    const plan = l2Plan(costed.plan, null, (i) => first.kept[i]);
    const fresh = firstPass(src, spec, tol, null).kept;
    for (const k of [0, 1, 2, 5]) {
      const t = first.kept[k];
      expect(t.costed.size > 0).toBe(sample.includes(k));
      expect(plan.encode(t, k).payload).toEqual(plan.encode(fresh[k], k).payload);
      // Done with: the tile keeps neither payloads nor SVDs.
      expect(t.costed.size + t.svds.size).toBe(0);
    }
  });

  it('a field whose tiles are not kept: the second pass takes the costing\'s payloads of the sampled tiles, the same bytes as with kept tiles', () => {
    const { tol, spec, src } = precipCase(64, 96, 32, 32, 40);
    const ref = planL2(src, spec, tol, null);
    const refPayloads = [0, 1, 2, 3, 4, 5].map((k) => ref.encode(ref.kept(k)!, k).payload);
    const plan = () => {
      const first = firstPass(src, spec, tol, null, undefined, undefined, { keep: false });
      expect(first.kept.length).toBe(0);
      return planL2(src, spec, tol, null, first);
    };
    const unkept = plan();
    expect(unkept.data).toEqual(ref.data);
    for (let k = 0; k < 6; k++) expect(unkept.encode(readTiles(src, spec, null, [k], tol)[0], k).payload).toEqual(refPayloads[k]);
    // The payload is the costing's, not made again: a tile whose centre is moved gets it, once (then its payload names that centre).
    const moved = () => {
      const t = readTiles(src, spec, null, [2], tol)[0];
      t.center += tol;
      return t;
    };
    const again = plan();
    expect(again.encode(moved(), 2).payload).toEqual(refPayloads[2]);
    expect(again.encode(moved(), 2).payload).not.toEqual(refPayloads[2]);
  });

  it('a plan on another thread: take hands out the costing\'s payload of a sampled tile once, and a plan given it encodes from it', () => {
    const { tol, spec, src } = precipCase(64, 96, 32, 32, 40);
    const ref = planL2(src, spec, tol, null);
    const first = firstPass(src, spec, tol, null, undefined, undefined, { keep: false });
    const here = planL2(src, spec, tol, null, first);
    const payload = here.take(2);
    expect(payload).toEqual(ref.encode(ref.kept(2)!, 2).payload);
    // Taken once; and here then encodes tile 2 afresh, to the same bytes.
    expect(here.take(2)).toBeUndefined();
    expect(here.encode(readTiles(src, spec, null, [2], tol)[0], 2).payload).toEqual(payload);
    // The plan made from the same data elsewhere (a worker's) starts from the payload it is given: a tile whose centre is
    // moved gets that payload, where encoding it would name the moved centre.
    const there = l2Plan(here.data, null);
    const moved = () => {
      const t = readTiles(src, spec, null, [2], tol)[0];
      t.center += tol;
      return t;
    };
    there.give(2, payload!);
    expect(there.encode(moved(), 2).payload).toEqual(payload);
    expect(there.encode(moved(), 2).payload).not.toEqual(payload);
  });

  it('encoding on a pool, a field whose tiles are not kept: each sampled tile\'s task carries the costing\'s payload, the others none; the same payloads as encodeField', async () => {
    const { spec, src } = precipCase(64, 96, 32, 32, 40);
    const basis = fieldBasis(src, spec);
    const plan = () => planL2(src, spec, basis.tol, null, firstPass(src, spec, basis.tol, null, undefined, undefined, { keep: false }));
    // The tiles the costing sampled (every tile of a field of 6: see sampleTiles).
    const costing = plan();
    const sampled = [0, 1, 2, 3, 4, 5].filter((k) => costing.take(k) !== undefined);
    expect(sampled.length).toBeGreaterThan(0);
    const carried = new Map<number, Uint8Array>();
    // The calling thread's lane only (one thread, no worker): the tasks it runs are those a worker would be posted.
    const pool = new WorkerPool(1, {
      local: (kind, body) => {
        const b = body as { index?: number; costed?: Uint8Array };
        if (kind === 'encode-tile' && b.costed) carried.set(b.index!, b.costed);
        return encodeTasks[kind as keyof typeof encodeTasks](body as never).result;
      },
    });
    const payloads: Uint8Array[] = [];
    try {
      await encodeWithChoices(src, spec, { ...basis, plan: plan() }, pool, (index, o) => (payloads[index] = o.payload));
    } finally {
      await pool.close();
    }
    expect([...carried.keys()].sort()).toEqual(sampled);
    const ref: Uint8Array[] = [];
    encodeField(src, spec, (index, t) => (ref[index] = t.payload));
    expect(payloads).toEqual(ref);
  });

  it('a costing task on another thread sends back the payloads and the SVDs it computed of a copy of the tile: the same as costing the tile here', () => {
    const { tol, spec, src } = precipCase(64, 96, 32, 32, 40);
    const first = firstPass(src, spec, tol, null);
    const plans = candidatePlans(first.spectra, tol);
    const ats = plans.map((_p, at) => at);
    const here = firstPass(src, spec, tol, null).kept[3];
    const payloads = costTile(plans, ats, here, 3);
    const copy = structuredClone(first.kept[3]);
    const rungs = new Set(copy.svds.keys());
    encodeTasks['cost-setup']({ key: 9001, plans });
    try {
      const r = encodeTasks['cost-tile']({ key: 9001, index: 3, ats, tile: copy }).result;
      expect(r.payloads).toEqual(payloads);
      // Only the rungs computed by the task; each the same numbers as computed here.
      expect(r.svds.length).toBeGreaterThan(0);
      for (const [rung, svd] of r.svds) {
        expect(rungs.has(rung)).toBe(false);
        expect(svd).toEqual(here.svds.get(rung));
      }
    } finally {
      encodeTasks['cost-forget']({ key: 9001 });
    }
  });

  it('SvdHandoff: of a field whose tiles are not kept, the sampled tiles\' SVDs only; nothing when the tiles are kept', () => {
    const { tol, spec, src } = precipCase(64, 96, 32, 32, 40);
    const tiles = firstPass(src, spec, tol, null).kept;
    for (const t of tiles) costTile(candidatePlans(firstPass(src, spec, tol, null).spectra, tol), [0], t, 0);
    const sample = sampleTiles(200);
    const off = new SvdHandoff(200, false);
    for (let i = 0; i < 200; i++) expect(off.wants(i)).toBe(sample.includes(i));
    off.add(sample[1], tiles[0]);
    off.add(sample[1] + 1, tiles[1]);
    expect([...off.handed.keys()]).toEqual([sample[1]]);
    expect(off.handed.get(sample[1])).toBe(tiles[0].svds);
    const kept = new SvdHandoff(200, true);
    expect(kept.wants(sample[1])).toBe(false);
    kept.add(sample[1], tiles[0]);
    expect(kept.handed.size).toBe(0);
  });

  it('takes the SVDs computed before of tiles prepared again (the tile trial\'s): the same objects, the same payloads', () => {
    const { tol, spec, src } = precipCase(64, 96, 32, 32, 40);
    // SVDs as a trial's costing leaves them on its tiles.
    const before = firstPass(src, spec, tol, null);
    costPlans(candidatePlans(before.spectra, tol), [0, 1, 2, 3, 4, 5], before.kept);
    const svds = new Map(before.kept.map((t, k) => [k, t.svds] as const));
    expect(svds.get(3)!.size).toBeGreaterThan(0);
    const ref = planL2(src, spec, tol, null);
    const refPayloads = [0, 1, 2, 3, 4, 5].map((k) => ref.encode(ref.kept(k)!, k).payload);
    // Kept tiles take them before their costing.
    const plan = planL2(src, spec, tol, null, undefined, undefined, svds);
    for (const [rung, s] of svds.get(3)!) expect(plan.kept(3)!.svds.get(rung)).toBe(s);
    expect([0, 1, 2, 3, 4, 5].map((k) => plan.encode(plan.kept(k)!, k).payload)).toEqual(refPayloads);
    // Not kept: the first pass hands the sampled tiles' SVDs on to the costing.
    const first = firstPass(src, spec, tol, null, undefined, undefined, { svds, keep: false });
    for (const [rung, s] of svds.get(3)!) expect(first.svds!.get(3)!.get(rung)).toBe(s);
    const unkept = planL2(src, spec, tol, null, first);
    expect([0, 1, 2, 3, 4, 5].map((k) => unkept.encode(readTiles(src, spec, null, [k], tol)[0], k).payload)).toEqual(refPayloads);
  });
});
