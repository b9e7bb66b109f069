/**
 * Reading fields with a field layer (spec/FORMAT.md 6.2.2): whole reads,
 * windows, single tiles, progressive prefixes and check, on archives made by
 * test/format/layered.ts (payloads from the library's tile encoder, factors
 * of our own). The values a reader returns are compared with an independent
 * computation of the spec's arithmetic: the term b = (((+0 + l0 r0) + l1 r1)
 * + ...) in binary64, in increasing rank order, from the decoded factor
 * fields, passed to the tile decoder of each payload.
 */
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { fillWords } from '../../src/codec/mask.js';
import { fieldStep, Method } from '../../src/codec/payload.js';
import { decodeTile } from '../../src/codec/tile-decode.js';
import { FormatCode, FormatError } from '../../src/errors.js';
import { tileCount, tileOrigin, tileShape, windowTiles } from '../../src/geometry.js';
import { MemorySource, type ByteRange, type ByteSource } from '../../src/io/source.js';
import type { FloatArray } from '../../src/types.js';
import { mulberry32 } from '../rng.js';
import { layeredArchive, smoothFactors, symbolsFlag, type LayeredSpec } from '../format/layered.js';

/** A field of slices x rows x cols: the layer's product, plus a smaller local pattern and noise (so tiles keep work of their own). */
function fieldOf(slices: number, rows: number, cols: number, k: number, noise: number, f32 = false): LayeredSpec {
  const stacked = slices * rows;
  const { left, right } = smoothFactors(stacked, cols, k);
  const v = f32 ? new Float32Array(stacked * cols) : new Float64Array(stacked * cols);
  const rng = mulberry32(5);
  for (let i = 0; i < stacked; i++) {
    for (let j = 0; j < cols; j++) {
      let x = 0;
      for (let K = 0; K < k; K++) x += left[i * k + K] * right[j * k + K];
      v[i * cols + j] = x + 0.05 * Math.sin(i / 2) * Math.cos(j / 3) + noise * (rng() - 0.5);
    }
  }
  return { values: v, shape: [rows, cols], slices, tile: [8, 10], tol: 1e-3, rank: k, left, right, factorTile: [4, k] };
}

/** The spec's term for one cell, written out independently of src/codec/layer.ts (spec/FORMAT.md 6.2.2). */
function termAt(left: Float64Array, right: Float64Array, k: number, i: number, j: number): number {
  let b = 0;
  for (let K = 0; K < k; K++) b = b + left[i * k + K] * right[j * k + K];
  return b;
}

/** Every value of a field decoded tile by tile with decodeTile and the independent term (LowRank tiles only, Exact ignore it). */
async function independent(bytes: Uint8Array, name: string, left: Float64Array, right: Float64Array, useLayer = true): Promise<FloatArray> {
  const a = await open(bytes);
  const { header: h } = a.field(name);
  const k = h.layer!.rank;
  const [rows, cols] = h.shape;
  const out = h.dtype === 'f32' ? new Float32Array((h.slices ?? 1) * rows * cols) : new Float64Array((h.slices ?? 1) * rows * cols);
  for (let t = 0; t < tileCount(h); t++) {
    const e = await a.tileEntry(name, t);
    const [m, n] = tileShape(h, t);
    const { s, i0, j0 } = tileOrigin(h, t);
    const term = new Float64Array(m * n);
    for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) term[i * n + j] = termAt(left, right, k, s * rows + i0 + i, j0 + j);
    const payload = bytes.subarray(e.offset, e.offset + e.length);
    const got = decodeTile(payload, { m, n, dtype: h.dtype, fill: fillWords(h.fill, h.dtype), where: 'test', fieldStep: fieldStep(h.bound.tolerance), layer: useLayer && e.method === Method.LowRank ? term : null, symbols: symbolsFlag(bytes) });
    for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) out[(s * rows + i0 + i) * cols + j0 + j] = got[i * n + j];
  }
  return out;
}

function maxDiff(a: FloatArray, b: FloatArray): number {
  let d = 0;
  for (let c = 0; c < a.length; c++) d = Math.max(d, Math.abs(a[c] - b[c]));
  return d;
}

describe('reading a layered field', () => {
  const spec = fieldOf(2, 24, 40, 3, 1e-3);
  const made = layeredArchive(spec);

  it('a whole read equals the tile decoder with the spec term, holds the bound, and needs the layer', async () => {
    const a = await open(made.bytes);
    expect(a.header.fields[made.at.main].layer).toEqual({ rank: 3, left: 1, right: 2 });
    expect(a.mainNames).toEqual(['field']);
    const got = await a.read('field');
    expect(got.shape).toEqual([2, 24, 40]);
    const want = await independent(made.bytes, 'field', made.left, made.right);
    // Bit for bit: the reader's term is the spec's (spec/FORMAT.md 6.2.2, one rounding per operation).
    expect(Buffer.from(got.values.buffer).equals(Buffer.from(want.buffer))).toBe(true);
    expect(Buffer.from(got.values.buffer).equals(Buffer.from(made.decoded.buffer))).toBe(true);
    // The bound the archive states holds for every value (spec/FORMAT.md 11: the layer is part of the reconstruction).
    expect(maxDiff(got.values, spec.values)).toBeLessThanOrEqual(spec.tol);
    // Without the term the tiles are far off: the layer carries the field.
    expect(maxDiff(await independent(made.bytes, 'field', made.left, made.right, false), spec.values)).toBeGreaterThan(100 * spec.tol);
    // The recorded value CRCs cover the final values (spec/FORMAT.md 12).
    expect((await a.read('field', { verify: true })).values).toEqual(got.values);
  });

  it('a window read gives the whole read cells, slice by slice; so does tile()', async () => {
    const a = await open(made.bytes);
    const whole = (await a.read('field')).values;
    for (const [s0, s1, r0, r1, c0, c1] of [
      [1, 2, 9, 15, 12, 25],
      [0, 2, 0, 24, 39, 40],
      [0, 1, 23, 24, 0, 40],
      [1, 2, 3, 4, 5, 6],
      // Two runs of left factor rows (one per slice), read at once.
      [0, 2, 9, 15, 0, 40],
    ]) {
      const w = await a.read('field', { slices: [s0, s1], rows: [r0, r1], cols: [c0, c1] });
      const width = c1 - c0;
      for (let s = s0; s < s1; s++) {
        for (let i = r0; i < r1; i++) {
          for (let j = c0; j < c1; j++) expect(w.values[((s - s0) * (r1 - r0) + i - r0) * width + j - c0]).toBe(whole[(s * 24 + i) * 40 + j]);
        }
      }
    }
    const t = 17;
    const tile = await a.tile('field', t, true);
    const { s, i0, j0 } = tileOrigin(a.field('field').header, t);
    for (let i = 0; i < 8; i++) for (let j = 0; j < 10; j++) expect(tile[i * 10 + j]).toBe(whole[(s * 24 + i0 + i) * 40 + j0 + j]);
  });

  it('factor fields listed first: the default field is the layered one, and reads still agree', async () => {
    const before = layeredArchive({ ...spec, factors: 'before' });
    const a = await open(before.bytes);
    expect(a.names).toEqual(['field.left', 'field.right', 'field']);
    expect(a.mainNames).toEqual(['field']);
    expect(a.field().header.name).toBe('field');
    expect(a.header.fields[0].factorOf).toEqual({ field: 2, side: 'left' });
    const got = await a.read();
    expect(Buffer.from(got.values.buffer).equals(Buffer.from(made.decoded.buffer))).toBe(true);
    // A factor field is still a field: it reads by name.
    expect((await a.read('field.right')).shape).toEqual([40, 3]);
  });

  it('check passes, with the original of the one main field given as an array', async () => {
    const a = await open(made.bytes);
    const report = await a.check(spec.values);
    expect(report.failures).toEqual([]);
    expect(report.fields.map((f) => f.name)).toEqual(['field', 'field.left', 'field.right']);
    expect(report.fields[0].measured!.maxErr).toBeLessThanOrEqual(spec.tol);
  });

  it('with a factor tile damaged, check reports by tile exactly the tiles of the field that cannot be read', async () => {
    // Found by the long fuzz run (npm run fuzz, seed 4242): check reported the batch once and no tile of it.
    const a0 = await open(made.bytes);
    const e = await a0.tileEntry('field.left', 1);
    const bad = made.bytes.slice();
    bad[e.offset + 2] ^= 0x55;
    const a = await open(bad);
    const h = a.field('field').header;
    const unreadable: number[] = [];
    for (let t = 0; t < tileCount(h); t++) {
      const got = await a.tile('field', t, true).catch((x: unknown) => x);
      if (got instanceof FormatError) unreadable.push(t);
      else if (got instanceof Error) throw got;
    }
    // The damaged left factor tile holds some tile rows only: some tiles read, some do not.
    expect(unreadable.length).toBeGreaterThan(0);
    expect(unreadable.length).toBeLessThan(tileCount(h));
    const report = await a.check();
    const byTile = report.failures.filter((f) => f.field === 'field' && f.tile >= 0).map((f) => f.tile);
    expect(byTile.sort((x, y) => x - y)).toEqual(unreadable);
    expect(report.failures.some((f) => f.field === 'field.left' && f.tile === 1)).toBe(true);
  });

  it('an f32 field of one slice with a fill value reads through its layer too', async () => {
    const f = fieldOf(1, 30, 23, 2, 0, true);
    f.values[7] = -999;
    f.values[100] = NaN;
    const m = layeredArchive({ ...f, fill: -999, tile: [7, 6] });
    const a = await open(m.bytes);
    const got = await a.read();
    expect(got.shape).toEqual([30, 23]);
    expect(Object.is(got.values[7], -999) && Number.isNaN(got.values[100])).toBe(true);
    const want = await independent(m.bytes, 'field', m.left, m.right);
    expect(Buffer.from(got.values.buffer).equals(Buffer.from(want.buffer))).toBe(true);
    expect((await a.check({ field: f.values })).ok).toBe(true);
  });
});

/** A byte source that records the ranges read. */
function counting(bytes: Uint8Array): { src: ByteSource; reads: ByteRange[] } {
  const inner = new MemorySource(bytes);
  const reads: ByteRange[] = [];
  const src: ByteSource = {
    label: 'counted',
    size: () => inner.size(),
    read: (offset, length) => {
      reads.push({ offset, length });
      return inner.read(offset, length);
    },
  };
  return { src, reads };
}

describe('what a window of a layered field fetches', () => {
  it('only the factor tiles holding the rows and columns of the tiles it touches', async () => {
    const spec = fieldOf(2, 24, 40, 3, 1e-3);
    const made = layeredArchive(spec);
    const { src, reads } = counting(made.bytes);
    // No gap bytes: merged reads carry only wanted bytes, so every byte fetched was asked for.
    const a = await open(src, { coalesce: { maxGap: 0 } });
    const fetched = (off: number, len: number) => reads.some((r) => r.offset < off + len && off < r.offset + r.length);
    reads.length = 0;
    const w = { slices: [1, 2] as [number, number], rows: [9, 15] as [number, number], cols: [12, 25] as [number, number] };
    await a.read('field', w);
    // Tile rows 8..16 of slice 1 are left factor rows 32..40 (tiles of 4 rows: 8 and 9); tile columns 10..30 are right factor rows 10..30 (tiles 2 to 7).
    const h = a.field('field').header;
    expect(windowTiles(h, 1, 9, 15, 12, 25).length).toBe(2);
    for (const [name, want] of [
      ['field.left', [8, 9]],
      ['field.right', [2, 3, 4, 5, 6, 7]],
    ] as const) {
      const f = a.field(name).header;
      const got: number[] = [];
      for (let t = 0; t < tileCount(f); t++) {
        const e = await a.tileEntry(name, t);
        if (fetched(e.offset, e.length)) got.push(t);
      }
      expect(got, name).toEqual(want);
    }
    // And of the main field only its 2 tiles.
    const main: number[] = [];
    for (let t = 0; t < tileCount(h); t++) {
      const e = await a.tileEntry('field', t);
      if (fetched(e.offset, e.length)) main.push(t);
    }
    expect(main).toEqual(windowTiles(h, 1, 9, 15, 12, 25));
  });
});

describe('what a read of Exact tiles fetches', () => {
  it('no factor row: Exact tiles ignore the layer (spec/FORMAT.md 11)', async () => {
    // Noise at a bound far below its spacing: every tile stored exactly.
    const rng = mulberry32(3);
    const { left, right } = smoothFactors(12, 10, 2);
    const made = layeredArchive({ values: Float64Array.from({ length: 120 }, () => rng()), shape: [12, 10], tile: [6, 5], tol: 1e-15, rank: 2, left, right });
    const { src, reads } = counting(made.bytes);
    const a = await open(src, { coalesce: { maxGap: 0 } });
    for (let t = 0; t < 4; t++) expect((await a.tileEntry('field', t)).method).toBe(Method.Exact);
    const factorTiles: [number, number][] = [];
    for (const name of ['field.left', 'field.right']) {
      for (let t = 0; t < tileCount(a.field(name).header); t++) {
        const e = await a.tileEntry(name, t);
        factorTiles.push([e.offset, e.length]);
      }
    }
    reads.length = 0;
    const got = await a.read('field');
    expect(Array.from(got.values)).toEqual(Array.from(made.decoded));
    expect(reads.some((r) => factorTiles.some(([o, l]) => r.offset < o + l && o < r.offset + r.length))).toBe(false);
  });
});

describe('progressive prefixes of a layered field', () => {
  it('a looser bound reads prefixes, and their values include the layer term', async () => {
    // Tiles of their own rank on top of a rank-2 layer, fine noise: a residual worth skipping.
    const rows = 64;
    const cols = 64;
    const { left, right } = smoothFactors(rows, cols, 2, 3);
    const v = new Float64Array(rows * cols);
    const rng = mulberry32(9);
    for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) v[i * cols + j] = termAt(left, right, 2, i, j) + 0.3 * Math.sin(i / 3 + j / 5) * Math.cos(i / 4) + 0.02 * (rng() - 0.5);
    const made = layeredArchive({ values: v, shape: [rows, cols], tile: [32, 32], tol: 1e-4, rank: 2, left, right, progressive: true, factorTile: [16, 2] });
    const a = await open(made.bytes);
    const loose = 0.05;
    const got = await a.read('field', { bound: `abs:${loose}` });
    expect(got.prefixTiles).toBeGreaterThan(0);
    // What the reader states and what holds: every value within the looser bound (spec/FORMAT.md 18).
    expect(got.achieved.maxErr).toBeLessThanOrEqual(loose);
    expect(maxDiff(got.values, v)).toBeLessThanOrEqual(got.achieved.maxErr);
    // The same prefix decoded independently with the spec's term.
    const h = a.field('field').header;
    for (let t = 0; t < tileCount(h); t++) {
      const e = await a.tileEntry('field', t);
      const quad = e.prefix.length > 0 ? e.prefix.slice(0, 4) : null;
      if (quad === null || !(quad[2] <= loose)) continue;
      const term = new Float64Array(32 * 32);
      const { i0, j0 } = tileOrigin(h, t);
      for (let i = 0; i < 32; i++) for (let j = 0; j < 32; j++) term[i * 32 + j] = termAt(made.left, made.right, 2, i0 + i, j0 + j);
      const bytes = made.bytes.subarray(e.offset, e.offset + quad[0]);
      const want = decodeTile(bytes, { m: 32, n: 32, dtype: 'f64', fill: null, where: 'test', fieldStep: fieldStep(h.bound.tolerance), groups: 1, layer: term });
      for (let i = 0; i < 32; i++) for (let j = 0; j < 32; j++) expect(got.values[(i0 + i) * cols + j0 + j]).toBe(want[i * 32 + j]);
    }
  });
});

describe('a factor value that is not finite', () => {
  for (const [side, cell, value] of [
    ['left', 10, Infinity],
    ['right', 4, NaN],
  ] as const) {
    it(`${side} factor holding ${value} is refused on read, named with its field and cell`, async () => {
      const spec = fieldOf(1, 16, 20, 2, 0);
      const made = layeredArchive({ ...spec, poison: { side, cell, value } });
      const a = await open(made.bytes);
      const e = await a.read('field').catch((x: unknown) => x);
      expect(e).toBeInstanceOf(FormatError);
      expect((e as FormatError).code).toBe(FormatCode.Malformed);
      const row = Math.floor(cell / 2);
      expect((e as FormatError).message).toMatch(new RegExp(`layer ${side} factor \\(field 'field\\.${side}'\\) holds ${value} at row ${row}, column ${cell % 2}, not a finite value`));
      // The factor field itself reads (a NaN or infinity is a value class of a field); check reports the layered field.
      await a.read(`field.${side}`);
      const report = await a.check();
      expect(report.ok).toBe(false);
      expect(report.failures.some((f) => f.field === 'field' && /not a finite value/.test(f.what))).toBe(true);
    });
  }
});
