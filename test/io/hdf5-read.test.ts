/**
 * NetCDF-4 and HDF5 input through h5wasm (src/io/hdf5-read.ts), checked
 * against the netCDF library itself: a NetCDF-4 file made by Debian's
 * netcdf-bin (`ncgen -k nc4`, then `nccopy` with deflate and chunking) must
 * read as exactly what `nccopy -k classic` converts it to (same dimensions,
 * variables, attributes and values, bit for bit). Groups, which classic
 * files lack, and plain HDF5 files made by hdf5-tools (`h5import`,
 * `h5repack` with GZIP and chunks) are checked against the values written.
 * Data: vega-datasets data/volcano.json (61 x 87 heights in metres).
 */
import { execFileSync, spawnSync } from 'node:child_process';
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { InputError } from '../../src/errors.js';
import { netcdf4ToClassic, readHdf5AsClassic } from '../../src/io/hdf5-read.js';
import { readNetcdfHeader, readNetcdfVariable } from '../../src/io/netcdf-read.js';
import { cdlValues, haveNetcdfBin, NCCOPY, ncgen } from '../cdl.js';
import { ensureBuilt, tempDir, volcano } from '../cli/helpers.js';
import { haveSystemTools } from '../system-tools.js';

const NC = haveNetcdfBin('the NetCDF-4 reading tests');
const H5 = haveSystemTools('the HDF5 reading tests', 'hdf5-tools', ['/usr/bin/h5import', '/usr/bin/h5repack']);
const g = volcano();
let t: ReturnType<typeof tempDir>;
beforeAll(() => {
  ensureBuilt();
  t = tempDir('rankfield-h5-');
});
afterAll(() => t?.remove());

const CDL = `netcdf run {
dimensions:
  time = UNLIMITED ;
  y = 61 ;
  x = 87 ;
variables:
  double time(time) ;
    time:units = "days since 2000-01-01" ;
  short height(time, y, x) ;
    height:units = "m" ;
    height:scale_factor = 0.01f ;
    height:add_offset = 100.f ;
    height:_FillValue = -32767s ;
  float slope(y, x) ;
    slope:_FillValue = -999.f ;
    slope:missing_value = -888.f ;
  :title = "volcano heights" ;
  :Conventions = "CF-1.8" ;
data:
  time = 0, 1 ;
  height = ${cdlValues([...g.values, ...g.values].map((h, i) => (i % 97 === 0 ? -32767 : Math.round((h - 100) * 100 + (i >= g.values.length ? 1 : 0)))))} ;
  slope = ${cdlValues(g.values.map((h, i) => (i % 50 === 0 ? -999 : i % 77 === 0 ? -888 : h / 7)))} ;
}
`;

describe.skipIf(!NC)('NetCDF-4 made by ncgen and nccopy', { timeout: 30_000 }, () => {
  let nc4: string;
  let packed: string;
  let classic: string;
  beforeAll(() => {
    nc4 = ncgen(CDL, join(t.dir, 'run4.nc'), 'nc4');
    packed = join(t.dir, 'run4z.nc');
    classic = join(t.dir, 'run3.nc');
    // Deflate level 5 and 1 x 16 x 16 chunks, then the netCDF library's own conversion to classic.
    execFileSync(NCCOPY, ['-k', 'nc4', '-d', '5', '-c', 'time/1,y/16,x/16', nc4, packed]);
    execFileSync(NCCOPY, ['-k', 'classic', nc4, classic]);
  });

  it.each([
    ['as written by ncgen', () => nc4],
    ['chunked and deflated by nccopy', () => packed],
  ])('reads %s as nccopy -k classic converts it: dims, variables, attributes, values', async (_what, file) => {
    const ours = await netcdf4ToClassic(file());
    const ref = new Uint8Array(readFileSync(classic));
    const a = readNetcdfHeader(ours, 'ours');
    const b = readNetcdfHeader(ref, 'nccopy');
    expect(a.dims.map((d) => [d.name, d.size, d.unlimited])).toEqual(b.dims.map((d) => [d.name, d.size, d.unlimited]));
    expect(a.globalAttrs).toEqual(Object.fromEntries(Object.entries(b.globalAttrs).filter(([k]) => k !== '_NCProperties')));
    expect(a.variables.map((v) => [v.name, v.type, v.dims])).toEqual(b.variables.map((v) => [v.name, v.type, v.dims]));
    for (const v of a.variables) {
      const w = b.variables.find((x) => x.name === v.name)!;
      expect([v.attrs, v.attrTypes]).toEqual([w.attrs, w.attrTypes]);
      if (v.shape.length < 2) continue;
      const x = readNetcdfVariable(ours, a, v.name);
      const y = readNetcdfVariable(ref, b, v.name);
      expect(Buffer.from(x.values.buffer).equals(Buffer.from(y.values.buffer)), v.name).toBe(true);
    }
  });

  it('an unlimited dimension without a coordinate variable takes its length from the variables, as nccopy -k classic gives it', async () => {
    // netCDF-4 keeps such a dimension as a dimension-only scale of current size 0 (from memory); its
    // length is that of the variables along it. The reference is the netCDF library's own conversion.
    const bare = CDL.replace('  double time(time) ;\n    time:units = "days since 2000-01-01" ;\n', '').replace('  time = 0, 1 ;\n', '');
    expect(bare).not.toContain('double time');
    const file = ncgen(bare, join(t.dir, 'bare4.nc'), 'nc4');
    const ref3 = join(t.dir, 'bare3.nc');
    execFileSync(NCCOPY, ['-k', 'classic', file, ref3]);
    const ours = await netcdf4ToClassic(file);
    const a = readNetcdfHeader(ours, 'ours');
    const b = readNetcdfHeader(new Uint8Array(readFileSync(ref3)), 'nccopy');
    expect(a.dims.map((d) => [d.name, d.size, d.unlimited])).toEqual(b.dims.map((d) => [d.name, d.size, d.unlimited]));
    expect(a.variables.map((v) => [v.name, v.type, v.dims])).toEqual(b.variables.map((v) => [v.name, v.type, v.dims]));
    const x = readNetcdfVariable(ours, a, 'height');
    const y = readNetcdfVariable(new Uint8Array(readFileSync(ref3)), b, 'height');
    expect(Buffer.from(x.values.buffer).equals(Buffer.from(y.values.buffer))).toBe(true);
  });

  it('reads nested groups, naming variables and dimensions by their path (GROUP/NAME), dimensions found in the group that defines them', async () => {
    // netCDF-4 CDL allows "group:" blocks, and a group's variables may use the dimensions of the
    // groups around it (NetCDF Users Guide, "Groups" and "CDL Syntax"; from memory).
    const cdl = `netcdf grouped {
dimensions:
  y = 2 ;
  x = 3 ;
variables:
  float top(y, x) ;
data:
  top = 1, 2, 3, 4, 5, 6 ;
group: ocean {
  dimensions:
    z = 2 ;
  variables:
    double depth(y, x) ;
      depth:units = "m" ;
    float z(z) ;
  data:
    depth = 10, 20, 30, 40, 50, 60 ;
    z = 5, 15 ;
  group: deep {
    variables:
      float temp(z, x) ;
    data:
      temp = 1.5, 2.5, 3.5, 4.5, 5.5, 6.5 ;
  }
  }
}
`;
    const f = await readHdf5AsClassic(ncgen(cdl, join(t.dir, 'grouped.nc'), 'nc4'));
    expect(f.groupPaths).toBe(true);
    expect(f.variables.map((v) => v.name).sort()).toEqual(['ocean/deep/temp', 'ocean/depth', 'ocean/z', 'top']);
    expect(f.dims.map((d) => `${d.name}=${d.size}`).sort()).toEqual(['ocean/z=2', 'x=3', 'y=2']);
    const depth = f.variables.find((v) => v.name === 'ocean/depth')!;
    expect([depth.dims, depth.attrs, Array.from(depth.values as Float64Array)]).toEqual([['y', 'x'], { units: 'm' }, [10, 20, 30, 40, 50, 60]]);
    const temp = f.variables.find((v) => v.name === 'ocean/deep/temp')!;
    expect([temp.dims, Array.from(temp.values as Float32Array)]).toEqual([['ocean/z', 'x'], [1.5, 2.5, 3.5, 4.5, 5.5, 6.5]]);
    // The in-memory classic bytes keep the paths, and the classic reader reads them back.
    const back = readNetcdfHeader(await netcdf4ToClassic(join(t.dir, 'grouped.nc')), 'grouped.nc');
    expect(back.variables.map((v) => v.name).sort()).toEqual(['ocean/deep/temp', 'ocean/depth', 'ocean/z', 'top']);
  });

  it('refuses a string variable with one InputError naming it', async () => {
    const cdl = 'netcdf s {\ndimensions:\n  n = 2 ;\nvariables:\n  string label(n) ;\ndata:\n  label = "a", "b" ;\n}\n';
    const file = ncgen(cdl, join(t.dir, 'strings.nc'), 'nc4');
    await expect(readHdf5AsClassic(file)).rejects.toThrow(InputError);
    await expect(readHdf5AsClassic(file)).rejects.toThrow(/variable '\/label' holds strings/);
  });
});

describe.skipIf(!H5)('plain HDF5 made by hdf5-tools', { timeout: 30_000 }, () => {
  it('h5import, then h5repack with GZIP and 16 x 16 chunks: the values read back exactly, dims named after the dataset', async () => {
    const txt = join(t.dir, 'heights.txt');
    writeFileSync(txt, Array.from(g.values, String).join(' '));
    // h5import configuration keywords (HDF5 tools documentation, h5import; from memory).
    const cfg = join(t.dir, 'heights.cfg');
    writeFileSync(cfg, 'PATH /grid/height\nINPUT-CLASS TEXTFP\nRANK 2\nDIMENSION-SIZES 61 87\nOUTPUT-CLASS FP\nOUTPUT-SIZE 64\n');
    const plain = join(t.dir, 'plain.h5');
    const zipped = join(t.dir, 'zipped.h5');
    execFileSync('/usr/bin/h5import', [txt, '-c', cfg, '-o', plain]);
    execFileSync('/usr/bin/h5repack', ['-f', 'GZIP=5', '-l', 'CHUNK=16x16', plain, zipped]);
    const f = await readHdf5AsClassic(zipped);
    expect(f.variables.map((v) => [v.name, v.dims, v.type])).toEqual([['grid/height', ['grid/height_dim0', 'grid/height_dim1'], 'double']]);
    expect(Array.from(f.variables[0].values as Float64Array)).toEqual(Array.from(g.values));
  });
});

describe('not HDF5', () => {
  it('a file that is not HDF5 is one InputError', async () => {
    const junk = join(t.dir, 'junk.h5');
    writeFileSync(junk, 'not an hdf5 file at all');
    await expect(readHdf5AsClassic(junk)).rejects.toThrow(/junk\.h5: not a readable HDF5 file/);
  });
});

describe('HDF5 error reports', () => {
  // h5wasm's throwing error handler (its CHANGELOG, v0.7.2): the HDF5 library's error stack becomes the
  // thrown Error's message instead of text on stderr. A child process shows that nothing reaches stderr.
  it('a failing HDF5 read or write is one InputError naming the HDF5 call, with nothing printed on stderr', () => {
    const junk = join(t.dir, 'junk2.h5');
    writeFileSync(junk, 'not an hdf5 file at all');
    const script = `
      const { readHdf5AsClassic } = await import(${JSON.stringify(new URL('../../dist/io/hdf5-read.js', import.meta.url).href)});
      const { writeNetcdf4 } = await import(${JSON.stringify(new URL('../../dist/io/hdf5-write.js', import.meta.url).href)});
      for (const f of [() => readHdf5AsClassic(${JSON.stringify(junk)}), () => writeNetcdf4(${JSON.stringify(join(t.dir, 'no-such-dir', 'x.nc'))}, { dims: [], globalAttrs: {}, variables: [] })]) {
        try { await f(); console.log('no error'); } catch (e) { console.log(e.constructor.name + ' ' + e.message); }
      }`;
    const r = spawnSync(process.execPath, ['--input-type=module', '-e', script], { encoding: 'utf8' });
    expect(r.stderr).toBe('');
    const lines = r.stdout.trim().split('\n');
    expect(lines[0]).toMatch(/^InputError .*junk2\.h5: not a readable HDF5 file \(H5Fopen\(\): /);
    expect(lines[1]).toMatch(/^InputError .*x\.nc: the HDF5 library could not write it \(H5Fcreate\(\): /);
  });
});
