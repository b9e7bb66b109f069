/**
 * The library's fill-value guard (pack's `fill` and `fillGuard` options): a
 * value that looks like an undeclared fill value is refused with an
 * InputError of code `fill` naming the value and how many cells hold it,
 * on every way into an archive (pack, packAsync, ArchiveBuilder.addBands);
 * `fill: V` declares it, `fill: null` or `fillGuard: false` packs it as data.
 * Data: vega-datasets data/volcano.json (61 x 87 heights in metres, open
 * data) with a block of cells set to a sentinel, as land cells are in ocean
 * fields.
 */
import { describe, expect, it } from 'vitest';
import { ArchiveBuilder, MemorySink, open, pack, packAsync } from '../../src/index.js';
import { volcano } from '../archive/datasets.js';
import { refusal } from '../refusal.js';

const g = volcano();
/** Rows 0..19, columns 0..29 set to `sentinel` (600 of 5307 cells). */
function withSentinel(sentinel: number): Float32Array {
  const v = Float32Array.from(g.values);
  for (let i = 0; i < 20; i++) for (let j = 0; j < 30; j++) v[i * 87 + j] = sentinel;
  return v;
}
/** The netCDF library's default fill value of float, 9.9692099683868690e+36 (netcdf.h NC_FILL_FLOAT; from memory). */
const NC_FILL_FLOAT = Math.fround(9.969209968386869e36);


describe('fill-value guard of the library', () => {
  it.each([
    ['-1e34', -1e34, /field 'sst': 600 cells hold -1e\+34, of magnitude 1e30 or more \(the other values lie in 94 \.\. 195\)/],
    ["netCDF's default float fill", NC_FILL_FLOAT, /600 cells hold 9\.96921e\+36, of magnitude 1e30 or more/],
    ['-999', -999, /600 cells hold -999, far outside the rest \(the other values lie in 94 \.\. 195\)/],
  ])('an undeclared %s is refused with code fill, naming the value and its count', (_what, sentinel, message) => {
    const e = refusal(() => pack(withSentinel(sentinel), g.shape, { bound: 'rel:1e-3', name: 'sst' }));
    expect(e.code).toBe('fill');
    expect(e.message).toMatch(message);
    expect(e.message).toMatch(/pass fill: \S+; to pack it as data, pass fill: null$/);
  });

  it('fill: V declares it: the archive packs, the cells come back bit for bit and the range is that of the heights', async () => {
    const v = withSentinel(-1e34);
    const a = await open(pack(v, g.shape, { bound: 'rel:1e-3', fill: -1e34 }));
    const h = a.field().header;
    // volcano.json heights run from 94 to 195 m (the dataset's own values).
    expect(h.bound.range).toEqual([94, 195]);
    const back = (await a.read()).values as Float32Array;
    for (let i = 0; i < 20; i++) for (let j = 0; j < 30; j++) expect(back[i * 87 + j]).toBe(Math.fround(-1e34));
    expect((await a.check(v)).ok).toBe(true);
  });

  it('fill: null and fillGuard: false pack it as data (the range then reaches it)', async () => {
    const v = withSentinel(-999);
    const asData = await open(pack(v, g.shape, { bound: 'abs:1', fill: null }));
    expect(asData.field().header.bound.range).toEqual([-999, 195]);
    // fillGuard: false keeps a declared fill and turns the guard off for the other values.
    const huge = withSentinel(1e35);
    huge[87 * 60] = -999;
    const both = await open(pack(huge, g.shape, { bound: 'abs:1', fill: -999, fillGuard: false }));
    expect(both.field().header.bound.range?.[1]).toBe(Math.fround(1e35));
  });

  it('a lone extreme value is data, not a fill value (at least 0.1% of the cells must hold it)', () => {
    const v = Float32Array.from(g.values);
    v[100] = -5000;
    expect(() => pack(v, g.shape, { bound: 'rel:1e-3' })).not.toThrow();
  });

  it('packAsync on threads and ArchiveBuilder.addBands refuse alike', async () => {
    const v = withSentinel(-1e34);
    await expect(packAsync(v, g.shape, { bound: 'rel:1e-3', threads: 2 })).rejects.toMatchObject({ code: 'fill' });
    const b = new ArchiveBuilder(new MemorySink());
    const e = refusal(() => b.addBands((r0, count) => v.slice(r0 * 87, (r0 + count) * 87), g.shape, 'f32', { bound: 'psnr:60', name: 'bands' }));
    expect(e.code).toBe('fill');
    expect(e.message).toMatch(/^field 'bands': 600 cells hold -1e\+34/);
  });

  it('fillGuard must be a boolean', () => {
    expect(refusal(() => pack(g.values, g.shape, { bound: 'abs:1', fillGuard: 'no' as unknown as boolean })).code).toBe('option');
  });
});

describe('RangeWatch.merge (the guard over a range pass made in parts)', () => {
  it('gives the state and verdict one watch over all the values gives', async () => {
    const { RangeWatch } = await import('../../src/codec/fill-guard.js');
    // Volcano heights with a sentinel of -999 (far below the rest) in 600 cells, and without; and with a huge one.
    for (const values of [withSentinel(-999), withSentinel(2000), Float32Array.from(g.values), withSentinel(-1e34)]) {
      const one = new RangeWatch(null);
      one.add(values);
      for (const cuts of [[0, 1000, values.length], [0, 17, 2500, 5000, values.length], [0, values.length, values.length]]) {
        const parts = cuts.slice(1).map((end, i) => {
          const w = new RangeWatch(null);
          w.add(values.subarray(cuts[i], end));
          return RangeWatch.fromState(null, w.state());
        });
        for (const w of parts.slice(1)) parts[0].merge(w);
        expect(parts[0].state()).toEqual(one.state());
        expect(parts[0].suspect()).toEqual(one.suspect());
      }
    }
  });
});
