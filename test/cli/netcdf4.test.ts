/**
 * NetCDF-4 (HDF5 inside) through the command line: a file made by Debian's
 * ncgen -k nc4 and chunked and deflated by nccopy packs, checks against
 * itself and unpacks to NetCDF classic that ncdump reads; unpack --netcdf4
 * writes NetCDF-4 that nccopy converts to the same classic file as unpack's
 * own; a damaged HDF5 file is one error line. Data: vega-datasets data/volcano.json.
 */
import { execFileSync } from 'node:child_process';
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { readNetcdfHeader } from '../../src/io/netcdf-read.js';
import { cdlValues, haveNetcdfBin, NCCOPY, NCDUMP, ncdumpHeader, ncgen } from '../cdl.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, rfIn, tempDir, volcano } from './helpers.js';

const RUN = haveNetcdfBin('the NetCDF-4 command-line tests');
const g = volcano();
let t: ReturnType<typeof tempDir>;
beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-nc4-');
  if (!RUN) return;
  const cdl = `netcdf v {
dimensions:
  Y = 61 ;
  X = 87 ;
variables:
  float height(Y, X) ;
    height:units = "m" ;
    height:_FillValue = -999.f ;
  :title = "volcano" ;
data:
  height = ${cdlValues(g.values.map((h, i) => (i % 41 === 0 ? -999 : h)))} ;
}
`;
  const nc4 = ncgen(cdl, join(t.dir, 'plain4.nc'), 'nc4');
  execFileSync(NCCOPY, ['-k', 'nc4', '-d', '5', '-c', 'Y/16,X/16', nc4, join(t.dir, 'v4.nc')]);
  // A classic file with a record dimension, a coordinate variable, text, and a packed short.
  const rec = `netcdf rec {
dimensions:
  time = UNLIMITED ;
  Y = 61 ;
  X = 87 ;
  nchar = 7 ;
variables:
  double time(time) ;
    time:units = "days since 2000-01-01" ;
  char site(nchar) ;
  short height(time, Y, X) ;
    height:scale_factor = 0.01f ;
    height:add_offset = 100.f ;
    height:_FillValue = -32767s ;
  :title = "volcano twice" ;
data:
  time = 0, 1 ;
  site = "Maunga " ;
  height = ${cdlValues([...g.values, ...g.values].map((h, i) => (i % 53 === 0 ? -32767 : Math.round((h - 100) * 100) + (i > g.values.length ? 1 : 0))))} ;
}
`;
  ncgen(rec, join(t.dir, 'rec.nc'));
}, CLI_TIMEOUT);
afterAll(() => t?.remove());

describe.skipIf(!RUN)('NetCDF-4 input', { timeout: CLI_TIMEOUT }, () => {
  it('packs a chunked, deflated NetCDF-4 file, checks against it, and unpacks to classic with a lossy-archive history line', async () => {
    const p = await rfIn(['pack', 'v4.nc', '-o', 'v4.rfz', '--bound', 'abs:0.5'], t.dir);
    expect(p.code, p.stderr).toBe(0);
    expect(p.stdout).toMatch(/height \(Y, X\) 61x87 f32/);
    const c = await rfIn(['check', 'v4.rfz', '--against', 'v4.nc'], t.dir);
    expect(c.code, c.stdout + c.stderr).toBe(0);
    expect(c.stdout).toMatch(/missing cells identical/);
    expect((await rfIn(['unpack', 'v4.rfz', '-o', 'back.nc'], t.dir)).code).toBe(0);
    // ncdump (netcdf-bin) reads the file written: CDF-1 classic, dims, attributes.
    const h = ncdumpHeader(join(t.dir, 'back.nc'));
    expect(h).toMatch(/float height\(Y, X\) ;/);
    expect(h).toMatch(/height:_FillValue = -999\.f ;/);
    expect(h).toMatch(/:history = ".* rankfield \S+ unpack: values decoded from a lossy archive \(height abs:0\.5\)/);
    expect(readFileSync(join(t.dir, 'back.nc')).subarray(0, 4)).toEqual(Buffer.from('CDF\x01', 'latin1'));
  });

  it('unpack --netcdf4 writes NetCDF-4 that the netCDF library reads as the classic output: nccopy -k classic gives the same dims, variables, attributes and values', async () => {
    expect((await rfIn(['pack', 'rec.nc', '-o', 'rec.rfz', '--bound', 'abs:0.004'], t.dir)).code).toBe(0);
    const u = await rfIn(['unpack', 'rec.rfz', '-o', 'rec4.nc', '--netcdf4'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    expect(u.stdout).toMatch(/\(NetCDF-4, \d+ bytes\)/);
    expect(execFileSync(NCDUMP, ['-k', join(t.dir, 'rec4.nc')], { encoding: 'utf8' }).trim()).toBe('netCDF-4');
    expect((await rfIn(['unpack', 'rec.rfz', '-o', 'rec3.nc'], t.dir)).code).toBe(0);
    execFileSync(NCCOPY, ['-k', 'classic', join(t.dir, 'rec4.nc'), join(t.dir, 'rec4to3.nc')]);
    const a = new Uint8Array(readFileSync(join(t.dir, 'rec4to3.nc')));
    const b = new Uint8Array(readFileSync(join(t.dir, 'rec3.nc')));
    const ha = readNetcdfHeader(a, 'nccopy');
    const hb = readNetcdfHeader(b, 'classic');
    expect(ha.dims).toEqual(hb.dims);
    const noHistory = (x: Record<string, unknown>) => Object.fromEntries(Object.entries(x).filter(([k]) => k !== 'history'));
    expect(noHistory(ha.globalAttrs)).toEqual(noHistory(hb.globalAttrs));
    expect(ha.variables.map((v) => [v.name, v.type, v.dims, v.attrs, v.attrTypes])).toEqual(hb.variables.map((v) => [v.name, v.type, v.dims, v.attrs, v.attrTypes]));
    // ncdump (netcdf-bin) prints the same data for both (the record padding, which readers skip, may differ).
    const data = (f: string) => execFileSync(NCDUMP, [join(t.dir, f)], { encoding: 'utf8' }).split('\ndata:\n')[1];
    expect(data('rec4to3.nc')).toBe(data('rec3.nc'));
    expect(data('rec3.nc')).toMatch(/site = "Maunga " ;/);
  });

  it('groups: variables of nested groups are packed under their paths, chosen by --var /GROUP/NAME, and written back into their groups, with the groups\' attributes, by --netcdf4 as ncdump shows the original', async () => {
    // netCDF-4 CDL "group:" blocks (NetCDF Users Guide, "CDL Syntax" and "Groups"; from memory); a group's
    // variables use the dimensions of the groups around it. Values: volcano.json's first rows.
    const row = (r: number, n: number) => cdlValues(g.values.slice(r * 87, r * 87 + n));
    const cdl = `netcdf grouped {
dimensions:
  x = 6 ;
variables:
  float top(x, x) ;
    top:units = "m" ;
  :title = "groups" ;
data:
  top = ${row(0, 36)} ;
group: ocean {
  dimensions:
    depth = 4 ;
  variables:
    float depth(depth) ;
      depth:units = "m" ;
    float temp(depth, x) ;
      temp:_FillValue = -999.f ;
    :region = "north shelf" ;
    :levels = 4 ;
  data:
    depth = 5, 15, 25, 35 ;
    temp = ${row(1, 23)}, -999 ;
  group: deep {
    variables:
      double temp(depth, x) ;
    data:
      temp = ${row(2, 24)} ;
  }
}
}
`;
    ncgen(cdl, join(t.dir, 'groups.nc'), 'nc4');
    const p = await rfIn(['pack', 'groups.nc', '-o', 'groups.rfz', '--bound', 'abs:0.001'], t.dir);
    expect(p.code, p.stderr).toBe(0);
    expect(p.stdout).toMatch(/ocean\/temp \(ocean\/depth, x\) 4x6 f32/);
    expect(p.stdout).toMatch(/ocean\/deep\/temp \(ocean\/depth, x\) 4x6 f64/);
    const one = await rfIn(['pack', 'groups.nc', '-o', 'one.rfz', '--bound', 'abs:0.001', '--var', '/ocean/deep/temp', '--json'], t.dir);
    expect(one.code, one.stderr).toBe(0);
    expect(JSON.parse(one.stdout).archive.fields.map((f: { name: string }) => f.name)).toEqual(['ocean/deep/temp']);
    expect((await rfIn(['check', 'groups.rfz', '--against', 'groups.nc', '--var', '/ocean/temp'], t.dir)).code).toBe(0);
    expectCliError(await rfIn(['unpack', 'groups.rfz', '--var', '/ocean/nope', '-o', 'x.npy'], t.dir), /no field '\/ocean\/nope' in groups\.rfz \(fields: .*ocean\/temp/);
    // Classic files have no groups: refused with the remedy.
    expectCliError(await rfIn(['unpack', 'groups.rfz', '-o', 'flat.nc'], t.dir), /NetCDF-4 groups \(.*ocean\/temp.*\), which NetCDF classic cannot hold: add --netcdf4/);
    // The group's attributes go with it (ncdump prints them in the group, compared below).
    expect(JSON.parse((await rfIn(['show', 'groups.rfz', '--json'], t.dir)).stdout).attrs).toMatchObject({ 'ocean/region': 'north shelf', 'ocean/levels': 4 });
    const u = await rfIn(['unpack', 'groups.rfz', '-o', 'groups-back.nc', '--netcdf4'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    // ncdump (netcdf-bin) prints the same groups, dimensions, variables, attributes and data as for the original,
    // but for the history line unpack adds; the values are within 0.001 of the originals, printed to ncdump's
    // own precision (7 significant digits for float, 17 for double), so the doubles are compared by value.
    const dump = (f: string) => execFileSync(NCDUMP, [join(t.dir, f)], { encoding: 'utf8' }).replace(/^netcdf \S+ \{/, '').replace(/\n\t\t:history = .*\n/, '\n');
    const [a, b] = [dump('groups.nc'), dump('groups-back.nc')];
    const noDeepData = (d: string) => d.replace(/(group: deep \{[\s\S]*?data:)[\s\S]*?(\} \/\/ group deep)/, '$1 $2');
    expect(noDeepData(b)).toBe(noDeepData(a));
    expect(b).toMatch(/group: ocean \{\n {2}dimensions:\n {2}\tdepth = 4 ;[\s\S]*group: deep \{/);
    const deepValues = (d: string) => /temp =([^;]*);\n {4}\} \/\/ group deep/.exec(d)![1].split(',').map(Number);
    const [da, db] = [deepValues(a), deepValues(b)];
    expect(db.length).toBe(24);
    for (let i = 0; i < 24; i++) expect(Math.abs(db[i] - da[i])).toBeLessThanOrEqual(0.001);
  });

  it('a char variable of a NetCDF-4 file (HDF5 strings of one byte each) is carried: pack, unpack --netcdf4, and ncdump shows the same text', async () => {
    // netCDF-4 stores NC_CHAR as one-byte HDF5 strings (netCDF User's Guide, "NetCDF-4 format"; from memory); ncgen -k nc4 makes it.
    const cdl = `netcdf s {
dimensions:
  y = 4 ;
  x = 5 ;
  n = 2 ;
  len = 6 ;
variables:
  float sst(y, x) ;
    sst:units = "degC" ;
  char station_name(n, len) ;
data:
  sst = 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17, 18, 19, 20 ;
  station_name = "alpha", "beta" ;
}
`;
    ncgen(cdl, join(t.dir, 'chars4.nc'), 'nc4');
    expect((await rfIn(['pack', 'chars4.nc', '-o', 'chars4.rfz', '--bound', 'abs:0.01', '-q'], t.dir)).code).toBe(0);
    expect((await rfIn(['unpack', 'chars4.rfz', '-o', 'chars4-back.nc', '--netcdf4', '-q'], t.dir)).code).toBe(0);
    const dump = execFileSync(NCDUMP, [join(t.dir, 'chars4-back.nc')], { encoding: 'utf8' });
    expect(dump).toMatch(/char station_name\(n, len\) ;/);
    expect(dump).toMatch(/station_name =\s+"alpha",\s+"beta" ;/);
  });

  it('--netcdf4 is refused for other outputs', async () => {
    expectCliError(await rfIn(['unpack', 'rec.rfz', '-o', 'x.npy', '--netcdf4'], t.dir), /--netcdf4 applies to NetCDF output/);
  });

  it('a damaged HDF5 file is one error line (the HDF5 library\'s own report kept off the terminal)', async () => {
    const whole = readFileSync(join(t.dir, 'v4.nc'));
    writeFileSync(join(t.dir, 'cut.nc'), whole.subarray(0, 600));
    expectCliError(await rfIn(['pack', 'cut.nc', '-o', 'cut.rfz', '--bound', 'abs:1'], t.dir), /cut\.nc: not a readable HDF5 file \(H5Fopen\(\)/);
  });
});
