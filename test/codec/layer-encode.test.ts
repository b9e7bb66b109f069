/**
 * The field layer as the encoder builds it (src/codec/layer-encode.ts,
 * src/linalg/band-svd.ts, src/pack.ts). Fields: open data shipped by the npm
 * package vega-datasets 3.2.1 (see test/archive/datasets.ts):
 * data/annual-precip.json (168 x 360) and data/volcano.json (61 x 87), and
 * data/seattle-weather-hourly-normals.csv, whose 8759 hourly temperature
 * normals (column `temperature`, deg C, from 2010-01-01T01:00) are laid out
 * as 52 weeks x 168 hours of the week: a stack of its weeks, of low rank as
 * a whole (a seasonal cycle times a daily one).
 *
 * The layered field is decoded with the core's own tile decoder and the
 * layer's term (test/codec/layered.ts), tile values checked against the
 * CRC-32 the encoder recorded.
 */
import { factorTileRows } from '../../src/codec/layer-encode.js';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { Matrix, SVD } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { fieldFactors } from '../../src/codec/layer-encode.js';
import { memoryBands, type FieldSpec } from '../../src/codec/field.js';
import { bandTruncatedSvd } from '../../src/linalg/band-svd.js';
import { ArchiveBuilder, pack } from '../../src/pack.js';
import { MemorySink } from '../../src/format/container.js';
import { InputError } from '../../src/errors.js';
import { precip, ROOT, volcano } from '../archive/datasets.js';
import { readLayered } from './layered.js';

/** Seattle hourly temperature normals as 52 weeks x 168 hours (see the file comment). */
function seattleWeeks(): { values: Float64Array; shape: [number, number] } {
  const lines = readFileSync(join(ROOT, 'node_modules', 'vega-datasets', 'data', 'seattle-weather-hourly-normals.csv'), 'utf8').trim().split('\n');
  // Header as shipped: date,pressure,temperature,wind; 8759 hourly rows.
  expect(lines[0]).toBe('date,pressure,temperature,wind');
  expect(lines.length - 1).toBe(8759);
  return { values: Float64Array.from(lines.slice(1, 1 + 52 * 168), (l) => Number(l.split(',')[2])), shape: [52, 168] };
}

/** Max |a - b| and RMSE over all cells (no missing cells in these fields). */
function errors(a: ArrayLike<number>, b: ArrayLike<number>): { max: number; rmse: number } {
  let max = 0;
  let se = 0;
  for (let i = 0; i < a.length; i++) {
    const d = Math.abs(a[i] - b[i]);
    max = Math.max(max, d);
    se += d * d;
  }
  return { max, rmse: Math.sqrt(se / a.length) };
}

/** The required flags of an archive: the u16 after the 8-byte magic and the u16 version (spec/FORMAT.md, prologue). */
function requiredFlags(bytes: Uint8Array): number {
  return bytes[10] | (bytes[11] << 8);
}

describe('layer round trips on annual-precip (168 x 360, 32 x 32 tiles)', () => {
  const g = precip();
  const [lo, hi] = [Math.min(...g.values), Math.max(...g.values)];
  const cases = [
    { bound: 'abs:20', limit: (e: { max: number; rmse: number }) => e.max <= 20 },
    { bound: 'rel:1e-3', limit: (e: { max: number; rmse: number }) => e.max <= 1e-3 * (hi - lo) },
    // PSNR = 20 log10(range / RMSE) (from memory, the usual definition; spec/FORMAT.md uses the valid values' max - min).
    { bound: 'psnr:50', limit: (e: { max: number; rmse: number }) => 20 * Math.log10((hi - lo) / e.rmse) >= 50 },
  ];
  it.each(cases)('$bound holds on the values as decoded, with a rank-3 layer', async ({ bound, limit }) => {
    const bytes = pack(g.values, g.shape, { bound, tile: 32, layer: 3 });
    const a = await open(bytes);
    const fields = a.header.fields;
    await a.close();
    expect(fields.map((f) => f.name)).toEqual(['field.layer-rows', 'field.layer-cols', 'field']);
    expect(fields[2].layer).toEqual({ rank: 3, left: 0, right: 1 });
    // The factor fields: f64, [rows, rank] and [cols, rank], each one tile here (at least 1024 values a factor tile, see factorTileRows).
    expect(fields[0]).toMatchObject({ dtype: 'f64', shape: [168, 3], tile: [168, 3], fill: null });
    expect(fields[1]).toMatchObject({ dtype: 'f64', shape: [360, 3], tile: [360, 3], fill: null });
    expect(requiredFlags(bytes) & 0x2).toBe(0x2);
    const { values, rank } = await readLayered(bytes, 'field');
    expect(rank).toBe(3);
    expect(limit(errors(values, g.values))).toBe(true);
  });

  it('with the tile shape by trial and a progressive layout: the bound holds, the tile trial runs before the layer', async () => {
    const bytes = pack(g.values, g.shape, { bound: 'psnr:45', tile: 'auto', progressive: true, layer: 2 });
    const a = await open(bytes);
    const h = a.header.fields[2];
    await a.close();
    expect(h.layer?.rank).toBe(2);
    // The factor fields follow the shape the trial chose.
    expect(a.header.fields[0].tile).toEqual([h.tile[0], 2]);
    expect(a.header.fields[1].tile).toEqual([h.tile[1], 2]);
    // PSNR = 20 log10(range / RMSE) (from memory).
    expect(20 * Math.log10((hi - lo) / errors((await readLayered(bytes, 'field')).values, g.values).rmse)).toBeGreaterThanOrEqual(45);
  });

  it("a factor tile is a power-of-two number of the field's tile rows (or columns), the fewest that hold 1024 values, or the whole factor", async () => {
    // The rule of spec/FORMAT.md section 19 (the figure is common practice, no source), worked by hand.
    expect(factorTileRows(64, 4, 6144)).toBe(256);
    expect(factorTileRows(64, 1, 6144)).toBe(1024);
    expect(factorTileRows(16, 2, 10000)).toBe(512);
    expect(factorTileRows(32, 3, 168)).toBe(168);
    expect(factorTileRows(2048, 1, 6144)).toBe(2048);
    // In an archive the factor fields are tiled so: annual-precip (168 x 360) in 4 x 4 tiles, rank 1: each factor whole.
    const a = await open(pack(g.values, g.shape, { bound: 'rel:1e-3', tile: 4, layer: 1 }));
    expect(a.header.fields[0].tile).toEqual([factorTileRows(4, 1, 168), 1]);
    expect(a.header.fields[1].tile).toEqual([factorTileRows(4, 1, 360), 1]);
    expect(a.header.fields.map((f) => f.tile[0])).toEqual([168, 360, 4]);
    await a.close();
  });
});

describe('a layer over slices', () => {
  it('three slices of the volcano grid (each raised 10 m on the last): the left factor spans slices x rows', async () => {
    const g = volcano();
    const cells = g.values.length;
    const stack = new Float64Array(3 * cells);
    for (let k = 0; k < 3; k++) for (let c = 0; c < cells; c++) stack[k * cells + c] = g.values[c] + 10 * k;
    const sink = new MemorySink();
    const b = new ArchiveBuilder(sink);
    b.add(stack, g.shape, { bound: 'abs:0.5', tile: 16, slices: 3, ndShape: [3, ...g.shape], layer: 2 });
    b.finish();
    const bytes = sink.bytes();
    const a = await open(bytes);
    expect(a.header.fields[0].shape).toEqual([3 * 61, 2]);
    await a.close();
    // abs:0.5: every value within 0.5 of the original (the bound's definition).
    expect(errors((await readLayered(bytes, 'field')).values, stack).max).toBeLessThanOrEqual(0.5);
  });
});

describe('the layer factors against ml-matrix (reference library)', () => {
  it('bandTruncatedSvd: leading singular values of the volcano grid', () => {
    const g = volcano();
    const [m, n] = g.shape;
    const a = { rows: m, cols: n, bands: (visit: (r0: number, count: number, v: Float64Array) => void) => {
      for (let r0 = 0; r0 < m; r0 += 16) visit(r0, Math.min(16, m - r0), g.values.subarray(r0 * n, Math.min(m, r0 + 16) * n));
    } };
    const r = bandTruncatedSvd(a, 4, 1);
    const ref = new SVD(new Matrix(Array.from({ length: m }, (_, i) => Array.from(g.values.subarray(i * n, (i + 1) * n)))), { computeLeftSingularVectors: false, computeRightSingularVectors: false, autoTranspose: true }).diagonal;
    // ml-matrix 6.15.1 SVD (Golub-Kahan, as in JAMA): the same values to 1e-9 relative (the sketch of 12 columns
    // with a power iteration resolves a spectrum decaying this fast far below that).
    for (let k = 0; k < 4; k++) expect(Math.abs(r.s[k] - ref[k]) / ref[0]).toBeLessThan(1e-9);
  });

  it('fieldFactors: balanced factors of the field minus its mean, L R^T = U S V^T', () => {
    const g = volcano();
    const [m, n] = g.shape;
    const spec: FieldSpec = { name: 'v', dtype: 'f64', rows: m, cols: n, tileRows: 16, tileCols: 16, bound: { mode: 'abs', value: 1 }, fill: null };
    const f = fieldFactors(memoryBands(g.values, n), spec, 3)!;
    const mean = g.values.reduce((s, v) => s + v, 0) / g.values.length;
    const centred = new Matrix(Array.from({ length: m }, (_, i) => Array.from(g.values.subarray(i * n, (i + 1) * n), (v) => v - mean)));
    const ref = new SVD(centred, { autoTranspose: true });
    // Each column of L and R has norm sqrt(s_k) (balanced: U sqrt(S), V sqrt(S), from memory).
    // With one power iteration the sketch's error in s_k shrinks like (s_{l+1} / s_k)^3 (Halko, Martinsson and Tropp
    // 2011, section 10, from memory): on this centred grid it measured 1.1e-9 of s_1.
    for (let k = 0; k < 3; k++) {
      expect(Math.abs(f.s[k] - ref.diagonal[k]) / ref.diagonal[0]).toBeLessThan(1e-7);
      let l2 = 0;
      for (let i = 0; i < m; i++) l2 += f.left[i * 3 + k] ** 2;
      expect(Math.abs(Math.sqrt(l2) - Math.sqrt(f.s[k])) / Math.sqrt(f.s[k])).toBeLessThan(1e-6);
    }
    // The rank-3 product equals ml-matrix's rank-3 truncation (Eckart-Young: the best rank-3 approximation is unique
    // when s_3 > s_4), to the sketch's accuracy: measured 1.7e-6 of the largest singular value, checked to 1e-5.
    const U = ref.leftSingularVectors;
    const V = ref.rightSingularVectors;
    let worst = 0;
    for (let i = 0; i < m; i++) {
      for (let j = 0; j < n; j++) {
        let mine = 0;
        let theirs = 0;
        for (let k = 0; k < 3; k++) {
          mine += f.left[i * 3 + k] * f.right[j * 3 + k];
          theirs += U.get(i, k) * ref.diagonal[k] * V.get(j, k);
        }
        worst = Math.max(worst, Math.abs(mine - theirs));
      }
    }
    expect(worst / ref.diagonal[0]).toBeLessThan(1e-5);
  });
});

describe("layer 'auto'", () => {
  it('keeps a layer on a stack of weeks of Seattle temperature normals packed with small tiles, and it packs smaller', async () => {
    const s = seattleWeeks();
    const off = pack(s.values, s.shape, { bound: 'psnr:40', tile: 8 });
    const auto = pack(s.values, s.shape, { bound: 'psnr:40', tile: 8, layer: 'auto' });
    const a = await open(auto);
    const layered = a.header.fields.find((f) => f.name === 'field');
    await a.close();
    expect(layered?.layer?.rank).toBeGreaterThan(0);
    // Measured: 6703 B without, 5693 B with a rank-8 layer (the estimate compares real bytes of a sample).
    expect(auto.length).toBeLessThan(off.length);
    const { values } = await readLayered(auto, 'field');
    let lo = Infinity;
    let hi = -Infinity;
    for (const v of s.values) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
    // PSNR = 20 log10(range / RMSE) (from memory).
    expect(20 * Math.log10((hi - lo) / errors(values, s.values).rmse)).toBeGreaterThanOrEqual(40);
  });

  it('keeping none, writes the archive without a layer, byte for byte (no required flag either)', () => {
    const s = seattleWeeks();
    // Measured: at psnr:60 with 16 x 16 tiles no rank pays on this field.
    const off = pack(s.values, s.shape, { bound: 'psnr:60', tile: 16 });
    expect(pack(s.values, s.shape, { bound: 'psnr:60', tile: 16, layer: 'auto' })).toEqual(off);
  });

  it('tries nothing where one tile covers the field: the archive is the one without a layer, byte for byte', () => {
    const s = seattleWeeks();
    // 52 x 168 = 8736 cells: the tile trial keeps the whole field as one tile.
    const off = pack(s.values, s.shape, { bound: 'psnr:40' });
    expect(pack(s.values, s.shape, { bound: 'psnr:40', layer: 'auto' })).toEqual(off);
    expect(requiredFlags(off)).toBe(0);
  });
});

describe('bad layer options', () => {
  const g = volcano();
  it.each([0, -1, 1.5, 62, 65, NaN, '2', 'all', null])('refuses layer %s with an InputError naming the range', (layer) => {
    // The volcano grid is 61 x 87: ranks 1..61.
    expect(() => pack(g.values, g.shape, { bound: 'abs:1', tile: 16, layer: layer as never })).toThrow(InputError);
    expect(() => pack(g.values, g.shape, { bound: 'abs:1', tile: 16, layer: layer as never })).toThrow(/layer must be 'auto', 'off' or a rank, an integer in 1\.\.61/);
  });

  it('refuses a layer on a sink that cannot patch the prologue unless the builder was told', () => {
    const parts: Uint8Array[] = [];
    const b = new ArchiveBuilder({ write: (x: Uint8Array) => void parts.push(x.slice()) });
    expect(() => b.add(g.values, g.shape, { bound: 'abs:1', tile: 16, layer: 2 })).toThrow(/create the ArchiveBuilder with \{ layer: true \}/);
    const c = new ArchiveBuilder({ write: (x: Uint8Array) => void parts.push(x.slice()) }, {}, { layer: true });
    expect(c.add(g.values, g.shape, { bound: 'abs:1', tile: 16, layer: 2 }).layer).toEqual({ rank: 2, left: 0, right: 1 });
  });
});
