/**
 * N-D inputs and originals on the command line, and formats told apart by
 * their first bytes: pack takes a 3-D .npy and raw with a 3-D --shape;
 * check --against takes every input pack takes (N-D .npy, raw with an N-D
 * shape, NetCDF with --var) and reports each variable; a NetCDF classic file
 * is read as NetCDF whatever its name, a .npy file whatever its name.
 * Data: vega-datasets data/annual-precip.json (168 x 360, open data), every
 * second row and column, cut into 4 bands of 21 rows: a 4 x 21 x 180 array; NetCDF files made by
 * Debian's ncgen from CDL (NetCDF Users Guide, CDL syntax).
 */
import { copyFileSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/index.js';
import { formatNpy, parseNpy } from '../../src/io/npy.js';
import { precip } from '../archive/datasets.js';
import { cdlValues, haveNetcdfBin, ncgen } from '../cdl.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, maxAbsError, rfIn, tempDir, volcano } from './helpers.js';

let t: ReturnType<typeof tempDir>;
const g = precip();
/** Every second row and column of the grid (84 x 180), as float32. */
const values = Float32Array.from({ length: 84 * 180 }, (_, k) => g.values[2 * Math.floor(k / 180) * 360 + 2 * (k % 180)]);
const ND = [4, 21, 180];

beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-nd-');
  writeFileSync(join(t.dir, 'p3.npy'), formatNpy({ data: values, shape: ND, dtype: 'f32' }));
  writeFileSync(join(t.dir, 'p3.f32'), new Uint8Array(values.buffer));
  // A .npy file under another name: read by its header.
  copyFileSync(join(t.dir, 'p3.npy'), join(t.dir, 'p3-npy.bin'));
});
afterAll(() => t?.remove());

describe('N-D .npy and raw', { timeout: CLI_TIMEOUT }, () => {
  it('pack takes a 3-D .npy as slices; unpack gives the 3-D array back within the bound; check --against it passes', async () => {
    const r = await rfIn(['pack', 'p3.npy', '-o', 'p3.rfz', '--bound', 'abs:2'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/\(4x21x180 f32, field 'p3', layout slices\)/);
    expect((await rfIn(['unpack', 'p3.rfz', '-o', 'back.npy'], t.dir)).code).toBe(0);
    const back = parseNpy(new Uint8Array(readFileSync(join(t.dir, 'back.npy'))), 'back.npy');
    expect(back.shape).toEqual(ND);
    // abs:E bounds every value (the bound's definition in pack --help); NaN cells of the grid kept.
    expect(maxAbsError(values, back.data)).toBeLessThanOrEqual(2);
    const c = await rfIn(['check', 'p3.rfz', '--against', 'p3.npy'], t.dir);
    expect(c.code, c.stdout + c.stderr).toBe(0);
    expect(c.stdout).toMatch(/measured +max error/);
  });

  it('a 3-D .npy in Fortran order packs as its C-order array: unpack gives the same values as the C-order file, check --against it passes', async () => {
    // The .npy format description (numpy.lib.format): with 'fortran_order': True the data is in
    // column-major order, the first axis fastest: element (i, j, k) at i + 4 (j + 21 k).
    const dict = `{'descr': '<f4', 'fortran_order': True, 'shape': (4, 21, 180), }`;
    const hl = Math.ceil((10 + dict.length + 1) / 64) * 64 - 10;
    const bytes = new Uint8Array(10 + hl + values.length * 4);
    bytes.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0, hl & 0xff, hl >> 8]);
    for (let i = 0; i < hl - 1; i++) bytes[10 + i] = i < dict.length ? dict.charCodeAt(i) : 0x20;
    bytes[10 + hl - 1] = 0x0a;
    const view = new DataView(bytes.buffer, 10 + hl);
    for (let i = 0; i < 4; i++) for (let j = 0; j < 21; j++) for (let k = 0; k < 180; k++) view.setFloat32((i + 4 * (j + 21 * k)) * 4, values[(i * 21 + j) * 180 + k], true);
    writeFileSync(join(t.dir, 'p3f.npy'), bytes);
    const r = await rfIn(['pack', 'p3f.npy', '-o', 'p3f.rfz', '--bound', 'abs:2', '--tile', '21', '--name', 'p'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    expect((await rfIn(['pack', 'p3.npy', '-o', 'p3c.rfz', '--bound', 'abs:2', '--tile', '21', '--name', 'p'], t.dir)).code).toBe(0);
    // The same array, so the same archive byte for byte (packing is deterministic).
    expect(Buffer.compare(readFileSync(join(t.dir, 'p3f.rfz')), readFileSync(join(t.dir, 'p3c.rfz')))).toBe(0);
    const c = await rfIn(['check', 'p3f.rfz', '--against', 'p3f.npy'], t.dir);
    expect(c.code, c.stdout + c.stderr).toBe(0);
  });

  it('raw with a 3-D --shape packs and checks (the field\'s shape is the default)', async () => {
    const r = await rfIn(['pack', 'p3.f32', '-o', 'raw3.rfz', '--bound', 'abs:2', '--shape', '4x21x180', '--dtype', 'f32'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    expect((await rfIn(['check', 'raw3.rfz', '--against', 'p3.f32'], t.dir)).code).toBe(0);
    expect((await rfIn(['check', 'raw3.rfz', '--against', 'p3.f32', '--shape', '4x21x180'], t.dir)).code).toBe(0);
    const bad = await rfIn(['check', 'raw3.rfz', '--against', 'p3.f32', '--shape', '84x180'], t.dir);
    expectCliError(bad, /original 'p3\.f32' has shape 84x180, but field 'p3' of 'raw3\.rfz' has shape 4x21x180/);
  });

  it('--matrix axis0:space lays the leading axis out as rows (axis names are case-insensitive)', async () => {
    const r = await rfIn(['pack', 'p3.npy', '-o', 'm.rfz', '--bound', 'abs:2', '--matrix', 'AXIS0:space'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(join(t.dir, 'm.rfz'));
    expect([a.header.fields[0].layout, a.header.fields[0].shape]).toEqual(['matrix:1', [4, 21 * 180]]);
    await a.close();
    const bad = await rfIn(['pack', 'p3.npy', '-o', 'm2.rfz', '--bound', 'abs:2', '--matrix', 'time:space'], t.dir);
    expectCliError(bad, /its axes are axis0, axis1, axis2/);
  });

  it('a .npy file is read by its header whatever its name', async () => {
    const r = await rfIn(['pack', 'p3-npy.bin', '-o', 'named.rfz', '--bound', 'abs:2'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/4x21x180 f32/);
  });
});

describe.skipIf(!haveNetcdfBin('the NetCDF check --against tests'))('NetCDF originals and names (ncgen)', { timeout: CLI_TIMEOUT }, () => {
  const v = volcano();
  const cdl = (shift: number) => `netcdf two {
dimensions:
  y = 61 ;
  x = 87 ;
variables:
  double height(y, x) ;
  float half(y, x) ;
data:
  height = ${cdlValues(v.values.map((h) => h + shift))} ;
  half = ${cdlValues(v.values.map((h) => h / 2))} ;
}
`;
  beforeAll(async () => {
    ncgen(cdl(0), join(t.dir, 'two.nc'));
    ncgen(cdl(5), join(t.dir, 'shifted.nc'));
    // NetCDF classic under names older archives use, and under none.
    copyFileSync(join(t.dir, 'two.nc'), join(t.dir, 'two.cdf'));
    copyFileSync(join(t.dir, 'two.nc'), join(t.dir, 'two-data'));
  });

  it('a NetCDF classic file is read as NetCDF whatever its name', async () => {
    for (const name of ['two.cdf', 'two-data']) {
      const r = await rfIn(['pack', name, '-o', `${name}.rfz`, '--bound', 'abs:0.1'], t.dir);
      expect(r.code, r.stderr).toBe(0);
      expect(r.stdout).toMatch(/packed 2 variables/);
    }
  });

  it('check --against a NetCDF original compares every variable and reports each', async () => {
    const c = await rfIn(['check', 'two.cdf.rfz', '--against', 'two.nc'], t.dir);
    expect(c.code, c.stdout + c.stderr).toBe(0);
    expect(c.stdout).toMatch(/against 'two\.nc' \(fields 'height', 'half'\)/);
    expect(c.stdout.match(/measured +max error/g)).toHaveLength(2);
  });

  it('a variable that differs from the archive fails the check (exit 1), named; --var limits the comparison', async () => {
    const c = await rfIn(['check', 'two.cdf.rfz', '--against', 'shifted.nc'], t.dir);
    expect(c.code).toBe(1);
    expect(c.stdout).toMatch(/FAIL field 'height'/);
    expect(c.stdout).not.toMatch(/FAIL field 'half'/);
    expect((await rfIn(['check', 'two.cdf.rfz', '--against', 'shifted.nc', '--var', 'half'], t.dir)).code).toBe(0);
  });

  it('options of raw originals are refused for a NetCDF original, and --var for others', async () => {
    expectCliError(await rfIn(['check', 'two.cdf.rfz', '--against', 'two.nc', '--shape', '61x87'], t.dir), /--shape describe a \.npy or raw original; 'two\.nc' is NetCDF/);
    expectCliError(await rfIn(['check', 'p3.rfz', '--against', 'p3.npy', '--var', 'x'], t.dir), /--var chooses variables of a NetCDF original/);
  });
});
