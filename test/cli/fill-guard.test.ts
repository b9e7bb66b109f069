/**
 * The fill-value guard of `pack`: a value that looks like an undeclared
 * fill value is refused with one line naming it and its count, until the
 * user says --fill V (missing) or --no-fill (data). Data: vega-datasets
 * data/volcano.json (61 x 87 heights in metres, open data) with a block of
 * cells set to a sentinel, as land cells are in ocean fields; and the same
 * grid in a NetCDF classic file made by Debian's ncgen (no _FillValue).
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { cdlValues, haveNetcdfBin, ncgen } from '../cdl.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, maxAbsError, rfIn, tempDir, volcano } from './helpers.js';

let t: ReturnType<typeof tempDir>;
const g = volcano();
/** Rows 0..19, columns 0..29 set to `sentinel` (600 of 5307 cells). */
function withSentinel(sentinel: number, f32: boolean): Float32Array | Float64Array {
  const v = f32 ? Float32Array.from(g.values) : Float64Array.from(g.values);
  for (let i = 0; i < 20; i++) for (let j = 0; j < 30; j++) v[i * 87 + j] = sentinel;
  return v;
}
const HUGE = withSentinel(-1e34, true);
const NINES = withSentinel(-9999, false);

beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-guard-');
  writeFileSync(join(t.dir, 'huge.npy'), formatNpy({ data: HUGE, shape: g.shape, dtype: 'f32' }));
  writeFileSync(join(t.dir, 'nines.npy'), formatNpy({ data: NINES, shape: g.shape, dtype: 'f64' }));
  writeFileSync(join(t.dir, 'plain.npy'), formatNpy({ data: g.values, shape: g.shape, dtype: 'f64' }));
});
afterAll(() => t?.remove());

describe('pack refuses an undeclared fill value', { timeout: CLI_TIMEOUT }, () => {
  it('a value of magnitude 1e30 or more: one line naming value and count, suggesting --fill and --no-fill', async () => {
    const r = await rfIn(['pack', 'huge.npy', '-o', 'h.rfz', '--bound', 'rel:1e-3'], t.dir);
    expectCliError(r, /'huge\.npy': 600 cells hold -1e\+34, of magnitude 1e30 or more \(the other values lie in 94 \.\. 195\).*give --fill -1e\+34; to pack it as data, give --no-fill$/);
    expect(() => readFileSync(join(t.dir, 'h.rfz'))).toThrow();
  });

  it('with --fill the sentinel is missing: kept bit for bit, and the bound is resolved on the heights alone', async () => {
    const r = await rfIn(['pack', 'huge.npy', '-o', 'hf.rfz', '--bound', 'rel:1e-2', '--fill', '-1e34'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(join(t.dir, 'hf.rfz'));
    const f = await a.read();
    const h = a.header.fields[0];
    // Source: vega-datasets volcano.json heights span 94..195 m, so rel:1e-2 is E = 1.01 m.
    expect(h.bound.range).toEqual([94, 195]);
    expect(maxAbsError(HUGE, f.values, Math.fround(-1e34))).toBeLessThanOrEqual(1.01);
    for (let k = 0; k < 30; k++) expect(f.values[k]).toBe(Math.fround(-1e34));
    await a.close();
  });

  it('a single extreme value in many cells far from the rest (-9999 among 94..195 m)', async () => {
    const r = await rfIn(['pack', 'nines.npy', '-o', 'n.rfz', '--bound', 'abs:0.5'], t.dir);
    expectCliError(r, /600 cells hold -9999, far outside the rest \(the other values lie in 94 \.\. 195\).*--fill -9999.*--no-fill/);
  });

  it('--no-fill packs the sentinel as data, under the bound', async () => {
    const r = await rfIn(['pack', 'nines.npy', '-o', 'nn.rfz', '--bound', 'abs:0.5', '--no-fill'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(join(t.dir, 'nn.rfz'));
    // abs:E bounds every value, the -9999 cells among them.
    expect(maxAbsError(NINES, (await a.read()).values)).toBeLessThanOrEqual(0.5);
    await a.close();
  });

  it('a field without a sentinel packs as before', async () => {
    const r = await rfIn(['pack', 'plain.npy', '-o', 'p.rfz', '--bound', 'abs:0.5'], t.dir);
    expect(r.code, r.stderr).toBe(0);
  });
});

describe.skipIf(!haveNetcdfBin('the NetCDF fill-guard test'))('NetCDF input without _FillValue (ncgen)', { timeout: CLI_TIMEOUT }, () => {
  const cdl = `netcdf volcano {
dimensions:
  y = 61 ;
  x = 87 ;
variables:
  double height(y, x) ;
    height:units = "m" ;
data:
  height = ${cdlValues(NINES)} ;
}
`;
  beforeAll(() => void ncgen(cdl, join(t.dir, 'nines.nc')));

  it('is refused, naming the variable', async () => {
    const r = await rfIn(['pack', 'nines.nc', '-o', 'nc.rfz', '--bound', 'abs:0.5'], t.dir);
    expectCliError(r, /variable 'height' of 'nines\.nc': 600 cells hold -9999, far outside the rest.*--fill -9999/);
  });

  it('--fill works for NetCDF input: the cells come back as missing, and the .nc written back declares _FillValue', async () => {
    const r = await rfIn(['pack', 'nines.nc', '-o', 'ncf.rfz', '--bound', 'abs:0.5', '--fill', '-9999'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(join(t.dir, 'ncf.rfz'));
    expect(a.header.fields[0].fill).toBe(-9999);
    expect(a.header.fields[0].bound.range).toEqual([94, 195]);
    await a.close();
    expect((await rfIn(['unpack', 'ncf.rfz', '-o', 'back.nc'], t.dir)).code).toBe(0);
    const { ncdumpHeader } = await import('../cdl.js');
    // CF conventions 1.x section 2.5.1: _FillValue declares the missing cells (from memory).
    expect(ncdumpHeader(join(t.dir, 'back.nc'))).toMatch(/height:_FillValue = -9999\.? ;/);
  });
});
