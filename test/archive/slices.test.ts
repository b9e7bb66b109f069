/**
 * Fields of stacked slices (N-D variables): header keys slices, nd_shape,
 * dims, layout; required flag bit 0; slice-window reads; check over all
 * slices. Data: vega-datasets data/annual-precip.json (168 x 360), cut into
 * 4 slices of 42 x 360 (C order, no data moved), and data/volcano.json.
 */
import { describe, expect, it } from 'vitest';
import { ArchiveBuilder, FormatError, InputError, MemorySink, open, pack } from '../../src/index.js';
import type { Sink } from '../../src/format/container.js';
import { precip, volcano } from './datasets.js';
import { crc32 } from '../../src/format/crc32.js';

const grid = precip();
// NaN cells of the dataset (null in the JSON) are missing values.
const nd = [4, 42, 360];

/** Packed once per bound and layout and shared by the tests (which copy before changing a byte): each pack of the 60 480 values takes a second or more on a busy machine. */
const packed = new Map<string, Uint8Array>();
async function sliced(bound = 'abs:0.5', layout?: string): Promise<Uint8Array> {
  const key = `${bound} ${layout}`;
  const held = packed.get(key);
  if (held !== undefined) return held;
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink, { title: 'precip stack' });
  b.add(Float32Array.from(grid.values), [42, 360], { bound, tile: 32, name: 'precip', slices: 4, ndShape: nd, dims: ['band', 'lat', 'lon'], layout });
  b.finish();
  packed.set(key, sink.bytes());
  return packed.get(key)!;
}

// Each pack of the four slices (96 tiles of up to 32 x 32; under rmse the L2 plan takes every tile's spectrum)
// takes seconds when idle and over a minute on a machine loaded ten deep: hence the 120 s limit.
describe('fields of slices', { timeout: 120_000 }, () => {
  it('round-trips within the bound, NaN cells exact, nd_shape and dims restored, flag bit 0 set', async () => {
    const bytes = await sliced();
    // Prologue: magic (8), version u16, required flags u16, little-endian (spec/FORMAT.md, "Prologue").
    // Bit 0 (slices); bit 2 (symbols) as well, as annual-precip's residuals are dense enough for the symbol coder (spec 4, 19).
    expect(bytes[10] | (bytes[11] << 8)).toBe(5);
    const a = await open(bytes);
    const h = a.field('precip').header;
    expect([h.slices, h.nd_shape, h.dims, h.layout, h.shape]).toEqual([4, nd, ['band', 'lat', 'lon'], 'slices', [42, 360]]);
    expect((await a.loadIndex()).fields[0].offset.length).toBe(4 * 2 * 12); // 4 slices x ceil(42/32) x ceil(360/32) tiles
    const all = await a.read('precip');
    expect(all.shape).toEqual(nd);
    const orig = Float32Array.from(grid.values);
    let max = 0;
    for (let i = 0; i < orig.length; i++) {
      if (Number.isNaN(orig[i])) expect(Number.isNaN(all.values[i])).toBe(true);
      else max = Math.max(max, Math.abs(orig[i] - all.values[i]));
    }
    expect(max).toBeLessThanOrEqual(0.5);
    const report = await a.check({ precip: orig });
    expect(report.ok).toBe(true);
    expect(report.fields[0].tiles).toBe(96);
  });

  it('a window of slices and rows/cols equals the same part of the whole read', async () => {
    const a = await open(await sliced());
    const all = await a.read('precip');
    const w = await a.read('precip', { slices: [1, 3], rows: [30, 42], cols: [100, 170] });
    expect(w.shape).toEqual([2, 12, 70]);
    for (let s = 0; s < 2; s++) {
      for (let i = 0; i < 12; i++) {
        for (let j = 0; j < 70; j++) {
          const want = all.values[(s + 1) * 42 * 360 + (30 + i) * 360 + 100 + j];
          expect(Object.is(w.values[s * 12 * 70 + i * 70 + j], want) || w.values[s * 12 * 70 + i * 70 + j] === want).toBe(true);
        }
      }
    }
  });

  it('an L2 bound is met over the whole field, across slices', async () => {
    const a = await open(await sliced('rmse:0.8'));
    const orig = Float32Array.from(grid.values);
    const report = await a.check({ precip: orig });
    expect(report.ok).toBe(true);
    expect(report.fields[0].measured!.rmse).toBeLessThanOrEqual(0.8);
  });

  it("the 'matrix:1' layout keeps S = 1 and a whole read returns nd_shape", async () => {
    const v = volcano();
    // volcano 61 x 87 seen as (61, 3, 29): matrix:1 gives 61 x 87 again.
    const sink = new MemorySink();
    const b = new ArchiveBuilder(sink);
    b.add(v.values, [61, 87], { bound: 'abs:0.1', name: 'h', ndShape: [61, 3, 29], dims: ['y', 'xa', 'xb'], layout: 'matrix:1' });
    b.finish();
    const bytes = sink.bytes();
    expect(bytes[10] | (bytes[11] << 8)).toBe(0); // no slices, no required flag
    const a = await open(bytes);
    const r = await a.read('h');
    expect(r.shape).toEqual([61, 3, 29]);
    expect((await a.read('h', { rows: [0, 2] })).shape).toEqual([2, 87]);
    await expect(a.read('h', { slices: [0, 1] })).rejects.toThrow(InputError);
  });

  it('refuses inconsistent N-D options', () => {
    const b = new ArchiveBuilder(new MemorySink());
    const vals = new Float32Array(4 * 42 * 360);
    expect(() => b.add(vals, [42, 360], { bound: 'abs:1', slices: 4, ndShape: [4, 42, 361] })).toThrow(/nd_shape/);
    expect(() => b.add(vals, [42, 360], { bound: 'abs:1', slices: 4, ndShape: nd, dims: ['a'] })).toThrow(/dims/);
    expect(() => b.add(vals, [42, 360], { bound: 'abs:1', slices: 4, ndShape: nd, layout: 'matrix:1' })).toThrow(/layout/);
    expect(() => b.add(vals, [42, 360], { bound: 'abs:1', slices: 3 })).toThrow(/values/);
  });

  it('a sink without patch needs { slices: true } up front', () => {
    const parts: Uint8Array[] = [];
    const sink: Sink = { write: (x) => parts.push(x.slice()) };
    const vals = new Float32Array(2 * 8 * 8);
    expect(() => new ArchiveBuilder(sink).add(vals, [8, 8], { bound: 'abs:1', slices: 2 })).toThrow(/slices: true/);
    const b = new ArchiveBuilder(sink, {}, { slices: true });
    b.add(vals, [8, 8], { bound: 'abs:1', slices: 2 });
    b.finish();
  });

  it('an archive whose flag bit 0 is cleared is refused (a reader ignoring slices would misread)', async () => {
    const bytes = await sliced();
    const bad = bytes.slice();
    // Clear the flag in the prologue (offset 10) and the tail (offset 10), and reseal the tail's CRC
    // (over the header, the directory and tail bytes 0..11, at tail offset 12): spec/FORMAT.md, Sections 3.1 and 3.5.
    const tail = bad.length - 24;
    const view = new DataView(bad.buffer);
    view.setUint16(10, 0, true);
    view.setUint16(tail + 10, 0, true);
    const from = tail - view.getUint32(tail, true) - view.getUint32(tail + 4, true);
    view.setUint32(tail + 12, crc32(bad.subarray(from, tail + 12)), true);
    await expect(open(bad)).rejects.toThrow(/required flag bit 0 \(slices\) is not set/);
    const half = bytes.slice();
    half[10] = 0; // the prologue alone cleared: the tail disagrees
    await expect(open(half)).rejects.toThrow(FormatError);
    // Plain 2-D archives keep flags 0 and open as before.
    const plain = pack(Float32Array.from(volcano().values), [61, 87], { bound: 'abs:1' });
    expect(plain[10] | (plain[11] << 8)).toBe(0);
    await expect(open(plain)).resolves.toBeDefined();
  });
});
