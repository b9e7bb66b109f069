/**
 * The default tile shape ('auto') is chosen by trial on a sample. Checked
 * here on a real gridded field shipped by vega-datasets 3.2.1
 * (annual-precip.json: NOAA CFSv2 2016 annual precipitation, 360 x 168, see
 * vega.test.ts) by packing the whole field with every candidate and
 * comparing sizes, and on a thin time x space matrix whose columns are
 * exactly rank 2 (so, by Eckart-Young, a tile spanning more columns needs
 * no more factors per tile: the trial must not pick the small squares).
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { chooseTile, chooseTileAsync, sampleCost, spreadSample, spreadTiles, tileCandidates, type PickedTile } from '../../src/codec/auto-tile.js';
import { encodeField, encodeTile, fieldBasis, memoryBands, termFor, tileToEncode } from '../../src/codec/field.js';
import { fieldSpecOf, pack } from '../../src/pack.js';

function precip(): { values: Float32Array; shape: [number, number] } {
  const path = fileURLToPath(new URL('../../node_modules/vega-datasets/data/annual-precip.json', import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: number[] };
  return { values: Float32Array.from(g.values), shape: [g.height, g.width] };
}

describe('tile candidates', () => {
  it('squares, the whole field when small, and whole-side strips of thin fields', () => {
    expect(tileCandidates(168, 360)).toEqual([
      [64, 64],
      [128, 128],
      [168, 256],
      [168, 360],
    ]);
    expect(tileCandidates(128, 6144)).toEqual([
      [64, 64],
      [128, 128],
      [128, 256],
      [128, 512],
      [128, 1024],
      [128, 2048],
      [128, 3072],
    ]);
    // Tall and thin: the strips, turned; 3000 splits into 6, 3 and 1 parts (the whole side twice: one candidate).
    expect(tileCandidates(3000, 100)).toEqual([
      [64, 64],
      [128, 100],
      [256, 100],
      [500, 100],
      [1000, 100],
      [3000, 100],
    ]);
    // Both sides at least the sample's 1024: 512 too (four of them fill the sample).
    // Both sides at least 2048: 1024 too (tried only when 512 did best, chooseTile).
    expect(tileCandidates(4096, 4096)).toEqual([
      [64, 64],
      [128, 128],
      [256, 256],
      [512, 512],
      [1024, 1024],
    ]);
    expect(tileCandidates(2047, 4096)).toEqual([
      [64, 64],
      [128, 128],
      [256, 256],
      [512, 512],
    ]);
    expect(tileCandidates(1023, 4096)).toEqual([
      [64, 64],
      [128, 128],
      [256, 256],
    ]);
  });
});

describe('the trial samples tiles spread over rows and columns', () => {
  // A Latin-hypercube layout (McKay, Beckman and Conover, Technometrics 1979; from memory): with
  // at least as many tile rows and columns as samples, each of `count` equal row strata and each of
  // `count` equal column strata holds exactly one sample (a tile row or column belongs to the
  // stratum its centre lies in).
  it('one sample per row stratum and per column stratum, distinct and in row-major order', () => {
    for (const [gr, gc] of [[16, 16], [8, 8], [32, 8], [8, 40], [9, 27]]) {
      for (let count = 2; count <= 8; count++) {
        if (gr < count || gc < count) continue;
        const t = spreadTiles(gr, gc, count);
        expect(t.length).toBe(count);
        expect([...t].sort((a, b) => a - b)).toEqual(t);
        const rowStrata = new Set(t.map((x) => Math.floor(((Math.floor(x / gc) + 0.5) * count) / gr)));
        const colStrata = new Set(t.map((x) => Math.floor((((x % gc) + 0.5) * count) / gc)));
        expect(rowStrata.size).toBe(count);
        expect(colStrata.size).toBe(count);
      }
    }
  });
  it('grids smaller than the count both ways still give distinct tiles inside the grid', () => {
    for (const [gr, gc, count] of [[3, 3, 8], [2, 3, 5], [2, 2, 3], [1, 9, 8], [9, 1, 8]]) {
      const t = spreadTiles(gr, gc, count);
      expect(new Set(t).size).toBe(count);
      for (const x of t) expect(x >= 0 && x < gr * gc).toBe(true);
    }
  });
});

describe('the trial picks a candidate close to the smallest archive', () => {
  it('annual-precip at rel:1e-3 and psnr:50: within 10% of the best candidate packed whole', async () => {
    const { values, shape } = precip();
    for (const bound of ['rel:1e-3', 'psnr:50']) {
      const auto = pack(values, shape, { bound });
      const chosen = (await open(auto)).header.fields[0].tile;
      const packs = tileCandidates(...shape).map((t) => pack(values, shape, { bound, tile: t }));
      const sizes = packs.map((p) => p.length);
      expect(tileCandidates(...shape)).toContainEqual(chosen);
      // The tiles the trial encoded are used as the field's own (pointwise bounds): the archive must be the one
      // the chosen shape gives when it is asked for, byte for byte (test/parallel/threads.test.ts: on threads too).
      const k = tileCandidates(...shape).findIndex((t) => t[0] === chosen[0] && t[1] === chosen[1]);
      expect(Buffer.from(auto).equals(Buffer.from(packs[k])), `${bound}: auto and tile ${chosen.join('x')} differ`).toBe(true);
      // The trial measures a sample, not the whole field: close to the best, not always the best (common practice, no source).
      expect(auto.length, `${bound}: auto ${auto.length} bytes, candidates ${sizes.join(', ')}`).toBeLessThanOrEqual(1.1 * Math.min(...sizes));
    }
    // Ten packs of the whole 60,480-cell grid (the trial's and every candidate's, at two bounds): over 63 s measured
    // during `npm test` with a load average of 7-8.6 from other work on this 2-core machine, so a limit well above that.
  }, 180_000);

  it('a small field: candidates largest first, stopping at the first that does worse; the choice of weighing every candidate (annual-precip rel:1e-3)', async () => {
    const { values, shape } = precip();
    const { spec } = fieldSpecOf(shape, 'f32', { bound: 'rel:1e-3' });
    const src = memoryBands(values, shape[1]);
    const basis = fieldBasis(src, spec);
    // Every candidate weighed on its 8 spread tiles (all of them when it has fewer) by its tiles' smallest candidates (a
    // small field's measure, settled: see sampleCost): the exhaustive trial's choice.
    const rates = tileCandidates(...shape).map(([m, n]) => {
      const t = sampleCost(src, spec, basis, m, n, spreadSample(spec, m, n, 8), Infinity, true);
      return { shape: [m, n], rate: t.settle!() / t.valid };
    });
    const best = rates.reduce((a, b) => (b.rate < a.rate ? b : a)).shape;
    // The tiles the trial hands over for encoding, by shape (encoded here, in this thread, as a worker would).
    const handed: string[] = [];
    const encodeMany = async (tiles: PickedTile[]) => {
      handed.push(`${tiles[0].m}x${tiles[0].n}`);
      return tiles.map((t) => encodeTile(basis, tileToEncode(basis, t.index, t.tile, t.m, t.n, t.term), t.index));
    };
    const trial = await chooseTileAsync(src, spec, basis, encodeMany);
    expect(trial.shape).toEqual(best);
    // Measured here (finished payloads): 168 x 360 0.405 bytes a cell, 168 x 256 0.393, 128 x 128 0.433 (worse: the trial stops), 64 x 64 0.467.
    expect(handed).toEqual(['168x360', '168x256', '128x128']);
    // In one thread the same choice, whose tiles (searched, then finished as the only ones) are those encodeTile makes.
    const sync = chooseTile(src, spec, basis);
    expect(sync.shape).toEqual(best);
    expect([...sync.done.keys()]).toEqual([...trial.done.keys()]);
    for (const [index, o] of sync.done) expect(Buffer.from(o.payload).equals(Buffer.from(trial.done.get(index)!.payload))).toBe(true);
    // And the payloads encodeTile makes of the same tiles, each alone (the trial codes the others of a tile's candidates only for the tiles it keeps).
    const grid = { ...spec, tileRows: sync.shape[0], tileCols: sync.shape[1] };
    const cols = Math.ceil(shape[1] / sync.shape[1]);
    expect(sync.done.size).toBeGreaterThan(0);
    for (const [index, o] of sync.done) {
      const [ti, tj] = [Math.floor(index / cols), index % cols];
      const [m, n] = sync.shape;
      const tile = Float32Array.from({ length: m * n }, (_, c) => values[(ti * m + Math.floor(c / n)) * shape[1] + tj * n + (c % n)]);
      const alone = encodeTile(basis, tileToEncode(basis, index, tile, m, n, termFor(grid, index, m, n)), index);
      expect(Buffer.from(o.payload).equals(Buffer.from(alone.payload)), `tile ${index}`).toBe(true);
    }
  }, 60_000);

  it('a thin field: longest strip first, stopping at the first that does worse; the choice of weighing every candidate (a rank-2 time x space matrix, rel:1e-3)', async () => {
    // Columns exactly rank 2: by Eckart-Young a strip spanning more columns needs no more factors a tile, so the
    // whole width does best and the next strip already does worse.
    const rows = 96;
    const cols = 3000;
    const values = new Float32Array(rows * cols);
    for (let i = 0; i < rows; i++) {
      for (let j = 0; j < cols; j++) values[i * cols + j] = Math.sin(i / 7) * Math.cos(j / 40) + 0.5 * Math.cos(i / 11) * Math.sin(j / 90 + 1);
    }
    const { spec } = fieldSpecOf([rows, cols], 'f32', { bound: 'rel:1e-3' });
    const src = memoryBands(values, cols);
    const basis = fieldBasis(src, spec);
    const rates = tileCandidates(rows, cols).map(([m, n]) => {
      const t = sampleCost(src, spec, basis, m, n, spreadSample(spec, m, n, 8), Infinity, true);
      return { shape: [m, n], rate: t.bytes / t.valid };
    });
    const best = rates.reduce((a, b) => (b.rate < a.rate ? b : a)).shape;
    const handed: string[] = [];
    const encodeMany = async (tiles: PickedTile[]) => {
      handed.push(`${tiles[0].m}x${tiles[0].n}`);
      return tiles.map((t) => encodeTile(basis, tileToEncode(basis, t.index, t.tile, t.m, t.n, t.term), t.index));
    };
    const trial = await chooseTileAsync(src, spec, basis, encodeMany);
    expect(trial.shape).toEqual(best);
    expect(best).toEqual([rows, cols]);
    // The whole width, then the next longest strip (3 tiles of 1000), which does worse: the trial stops there.
    expect(handed).toEqual(['96x3000', '96x1000']);
    const sync = chooseTile(src, spec, basis);
    expect(sync.shape).toEqual(best);
    expect([...sync.done.keys()]).toEqual([0]);
  }, 60_000);

  it.each([
    ['an L2 candidate (its costing)', 'psnr:50', false],
    ['a pointwise candidate of several tiles (its tiles)', 'rel:1e-3', true],
  ] as const)('%s that cannot beat the best so far stops early, with bytes per cell above it; one that can is costed in full (annual-precip %s)', (_what, bound, pointwise) => {
    const { values, shape } = precip();
    const { spec } = fieldSpecOf(shape, 'f32', { bound });
    const src = memoryBands(values, shape[1]);
    const basis = fieldBasis(src, spec);
    expect(basis.pointwise).toBe(pointwise);
    const [m, n] = [64, 64];
    const picked = spreadSample(spec, m, n, 8);
    const whole = sampleCost(src, spec, basis, m, n, picked);
    const rate = whole.bytes / whole.valid;
    // A best so far of half this candidate's rate: it cannot beat that, and stops with fewer bytes than in full, yet more than the best.
    const lost = sampleCost(src, spec, basis, m, n, picked, rate / 2);
    expect(lost.bytes).toBeLessThan(whole.bytes);
    expect(lost.bytes / lost.valid).toBeGreaterThan(rate / 2);
    // A pointwise one stops before its last tile, counting the valid cells of all of them.
    if (pointwise) expect([lost.done.size < picked.length, lost.valid]).toEqual([true, whole.valid]);
    // A best so far just above its rate: costed in full, the same bytes.
    expect(sampleCost(src, spec, basis, m, n, picked, rate * 1.001).bytes).toBe(whole.bytes);
  }, 30_000);

  it('an L2 candidate whose tiles are every tile of a field one tile high hands its plan to the field: the payloads the field would make itself (annual-precip psnr:50)', () => {
    const { values, shape } = precip();
    const { spec } = fieldSpecOf(shape, 'f32', { bound: 'psnr:50' });
    const src = memoryBands(values, shape[1]);
    const basis = fieldBasis(src, spec);
    // 168 x 120 tiles: the field is one tile high and three wide, all of them sampled; 84 x 120 tiles: two high, and no plan.
    const tried = sampleCost(src, spec, basis, 168, 120, [0, 1, 2]);
    expect(tried.plan).toBeDefined();
    expect(sampleCost(src, spec, basis, 84, 120, [0, 1, 2, 3, 4, 5]).plan).toBeUndefined();
    const grid = { ...spec, tileRows: 168, tileCols: 120, autoTile: false };
    const payloads = (prior?: Parameters<typeof encodeField>[3]): Buffer[] => {
      const out: Buffer[] = [];
      encodeField(src, grid, (_i, t) => out.push(Buffer.from(t.payload)), prior);
      return out;
    };
    const own = payloads();
    const handed = payloads({ basis, done: new Map(), plan: tried.plan, ...(tried.spectra ? { spectra: tried.spectra } : {}) });
    expect(handed.length).toBe(3);
    handed.forEach((p, k) => expect(p.equals(own[k]), `tile ${k}`).toBe(true));
  }, 60_000);

  it('a rank-2 time x space matrix gets a strip across all its rows', async () => {
    const rows = 96;
    const cols = 3000;
    const v = new Float32Array(rows * cols);
    for (let i = 0; i < rows; i++) {
      for (let j = 0; j < cols; j++) v[i * cols + j] = Math.sin(i / 7) * Math.cos(j / 40) + 0.5 * Math.cos(i / 11) * Math.sin(j / 90 + 1);
    }
    const a = await open(pack(v, [rows, cols], { bound: 'psnr:60' }));
    const [tr, tc] = a.header.fields[0].tile;
    expect(tr).toBe(rows);
    expect(tc).toBeGreaterThanOrEqual(512);
    // The tile trial weighs the strips of this 288,000-cell field longest first under an L2 plan, and stops at the first
    // that does worse: 0.4 s here; when it packed every strip and square candidate, 68 s was measured with a load
    // average of 15 on this 2-core machine, so a limit well above what it takes now.
  }, 60_000);
});
