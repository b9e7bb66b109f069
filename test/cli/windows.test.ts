/**
 * Windows of N-D variables on every layout, by index and by coordinate:
 * --matrix with dimension names in another case, --slices of a matrix-laid
 * archive, --where coordinate ranges, and windows written to .nc with their
 * coordinate variables cut to match (read back with netcdfjs 4.0.0).
 * Data: vega-datasets data/annual-precip.json (168 x 360), every second row
 * and column (84 x 180), three times (x1, x1.5, x0.5) along a TIME
 * dimension, in a NetCDF classic file made by Debian's ncgen, with latitude
 * and longitude coordinates of our choosing (2-degree cells).
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { NetCDFReader } from 'netcdfjs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parseNpy } from '../../src/io/npy.js';
import { precip } from '../archive/datasets.js';
import { cdlValues, haveNetcdfBin, ncgen } from '../cdl.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, rfIn, tempDir } from './helpers.js';

const RUN = haveNetcdfBin('the window tests');
const T = 3;
const NY = 84;
const NX = 180;
const g = precip();
const grid = new Float64Array(T * NY * NX);
for (let s = 0; s < T; s++) for (let i = 0; i < NY; i++) for (let j = 0; j < NX; j++) grid[(s * NY + i) * NX + j] = g.values[2 * i * 360 + 2 * j] * [1, 1.5, 0.5][s];
/** Latitudes 83 down to -83 (decreasing, as the grid's rows run north to south), longitudes -179 to 179. */
const LAT = Array.from({ length: NY }, (_, i) => 83 - 2 * i);
const LON = Array.from({ length: NX }, (_, j) => -179 + 2 * j);
const E = 1;

let t: ReturnType<typeof tempDir>;
beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-win-');
  if (!RUN) return;
  const cdl = `netcdf rain {
dimensions:
  TIME = ${T} ;
  lat = ${NY} ;
  lon = ${NX} ;
variables:
  double TIME(TIME) ;
  float lat(lat) ;
    lat:units = "degrees_north" ;
  float lon(lon) ;
    lon:units = "degrees_east" ;
  double precip(TIME, lat, lon) ;
    precip:units = "mm" ;
data:
  TIME = 0, 1, 2 ;
  lat = ${LAT.join(', ')} ;
  lon = ${LON.join(', ')} ;
  precip = ${cdlValues(grid)} ;
}
`;
  ncgen(cdl, join(t.dir, 'rain.nc'));
  const r = await rfIn(['pack', 'rain.nc', '-o', 'm.rfz', '--bound', `abs:${E}`, '--matrix', 'time:space'], t.dir);
  expect(r.code, r.stderr).toBe(0);
}, CLI_TIMEOUT);
afterAll(() => t?.remove());

/** Largest |got - want| over the window rows i0.., cols j0.. of time s of the grid. */
function windowError(got: ArrayLike<number>, s0: number, s1: number, i0: number, i1: number, j0: number, j1: number): number {
  let m = 0;
  let k = 0;
  for (let s = s0; s < s1; s++) for (let i = i0; i < i1; i++) for (let j = j0; j < j1; j++) m = Math.max(m, Math.abs(got[k++] - grid[(s * NY + i) * NX + j]));
  expect(k).toBe(got.length);
  return m;
}

describe.skipIf(!RUN)('windows of a matrix-laid NetCDF variable', { timeout: CLI_TIMEOUT }, () => {
  it('--matrix matched the dimension TIME in another case; a name that matches none lists the real ones', async () => {
    expect((await rfIn(['show', 'm.rfz'], t.dir)).stdout).toMatch(/layout matrix/);
    expectCliError(await rfIn(['pack', 'rain.nc', '-o', 'x.rfz', '--bound', 'abs:1', '--matrix', 'depth:space'], t.dir), /the variables are precip\(TIME, lat, lon\)/);
  });

  it('--slices and --region count the variable\'s own axes on a matrix layout', async () => {
    const r = await rfIn(['unpack', 'm.rfz', '--slices', '1:3', '--region', '10:20,100:130', '-o', 's.npy'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const a = parseNpy(new Uint8Array(readFileSync(join(t.dir, 's.npy'))), 's.npy');
    expect(a.shape).toEqual([2, 10, 30]);
    // abs:E bounds every value (the bound's definition).
    expect(windowError(a.data, 1, 3, 10, 20, 100, 130)).toBeLessThanOrEqual(E);
  });

  it('--where lat=-30:30,lon=100:180 to .nc: the window of those coordinates, the coordinate variables cut to match', async () => {
    const r = await rfIn(['unpack', 'm.rfz', '--where', 'LAT=-30:30,lon=100:180', '-o', 'box.nc'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const i0 = LAT.findIndex((y) => y <= 30);
    const i1 = LAT.findIndex((y) => y < -30);
    const j0 = LON.findIndex((x) => x >= 100);
    const j1 = NX;
    // netcdfjs 4.0.0, an independent reader of the classic format.
    const b = new NetCDFReader(readFileSync(join(t.dir, 'box.nc')));
    expect(b.dimensions.map((d) => [d.name, d.size])).toEqual([['TIME', T], ['lat', i1 - i0], ['lon', j1 - j0]]);
    expect(b.getDataVariable('lat')).toEqual(LAT.slice(i0, i1));
    expect(b.getDataVariable('lon')).toEqual(LON.slice(j0, j1));
    expect(b.getDataVariable('TIME')).toEqual([0, 1, 2]);
    expect(windowError((b.getDataVariable('precip') as number[][]).flat(), 0, T, i0, i1, j0, j1)).toBeLessThanOrEqual(E);
  });

  it('--region to .nc cuts the dimensions and coordinates by index', async () => {
    expect((await rfIn(['unpack', 'm.rfz', '--var', 'precip', '--region', '4:8,0:5', '-o', 'r.nc'], t.dir)).code).toBe(0);
    const b = new NetCDFReader(readFileSync(join(t.dir, 'r.nc')));
    expect(b.getDataVariable('lat')).toEqual(LAT.slice(4, 8));
    expect(b.getDataVariable('lon')).toEqual(LON.slice(0, 5));
  });

  it('--where names that match no dimension, and ranges that select nothing, are refused with what there is', async () => {
    expectCliError(await rfIn(['unpack', 'm.rfz', '--where', 'depth=0:10', '-o', 'x.npy'], t.dir), /field 'precip' has no dimension 'depth'; its dimensions are TIME, lat, lon/);
    expectCliError(await rfIn(['unpack', 'm.rfz', '--where', 'lat=85:90', '-o', 'x.npy'], t.dir), /--where lat=85:90 selects nothing: coordinate 'lat' runs from -83 to 83/);
  });
});

describe.skipIf(!RUN)('windows of a 4-D variable written to .nc, on both layouts', { timeout: CLI_TIMEOUT }, () => {
  // (time 2, depth 3, lat 12, lon 10): the grid's time s, rows 30.., columns 60.., times 1 + depth / 10.
  const cell = (s: number, d: number, i: number, j: number) => grid[(s * NY + 30 + i) * NX + 60 + j] * (1 + d / 10);
  const DEPTH = [5, 15, 25];
  const four = new Float64Array(2 * 3 * 12 * 10);
  for (let s = 0, k = 0; s < 2; s++) for (let d = 0; d < 3; d++) for (let i = 0; i < 12; i++) for (let j = 0; j < 10; j++) four[k++] = cell(s, d, i, j);
  /** Largest |got - want| over the box of (time, depth, lat, lon) index ranges. */
  const boxError = (got: number[], r: [number, number][]) => {
    let m = 0;
    let k = 0;
    for (let s = r[0][0]; s < r[0][1]; s++) for (let d = r[1][0]; d < r[1][1]; d++) for (let i = r[2][0]; i < r[2][1]; i++) for (let j = r[3][0]; j < r[3][1]; j++) m = Math.max(m, Math.abs(got[k++] - cell(s, d, i, j)));
    expect(k).toBe(got.length);
    return m;
  };
  beforeAll(async () => {
    const cdl = `netcdf deep {
dimensions:
  time = UNLIMITED ;
  depth = 3 ;
  lat = 12 ;
  lon = 10 ;
variables:
  double time(time) ;
  float depth(depth) ;
  float lat(lat) ;
  float lon(lon) ;
  double rain(time, depth, lat, lon) ;
data:
  time = 10, 20 ;
  depth = ${DEPTH.join(', ')} ;
  lat = ${LAT.slice(30, 42).join(', ')} ;
  lon = ${LON.slice(60, 70).join(', ')} ;
  rain = ${cdlValues(four)} ;
}
`;
    ncgen(cdl, join(t.dir, 'deep.nc'));
    for (const [out, how] of [['d-slices.rfz', ['--layout', 'slices']], ['d-matrix.rfz', ['--matrix', 'time,depth:space']]] as const) {
      const r = await rfIn(['pack', 'deep.nc', '-o', out, '--bound', `abs:${E}`, '--tile', '8', ...how], t.dir);
      expect(r.code, r.stderr).toBe(0);
    }
  }, CLI_TIMEOUT);

  it.each(['d-slices.rfz', 'd-matrix.rfz'])('%s: --slices A:B,C:D (a range per leading axis) with --region gives that box, the coordinate variables cut to match', async (archive) => {
    const r = await rfIn(['unpack', archive, '--slices', '0:2,1:3', '--region', '2:7,3:9', '-o', `box-${archive}.nc`], t.dir);
    expect(r.code, r.stderr).toBe(0);
    // netcdfjs 4.0.0, an independent reader of the classic format.
    const b = new NetCDFReader(readFileSync(join(t.dir, `box-${archive}.nc`)));
    // netcdfjs gives the unlimited dimension size 0; the time variable counts its records.
    expect(b.dimensions.map((d) => [d.name, d.size])).toEqual([['time', 0], ['depth', 2], ['lat', 5], ['lon', 6]]);
    expect(b.getDataVariable('time')).toEqual([10, 20]);
    expect(b.getDataVariable('depth')).toEqual([15, 25]);
    expect(b.getDataVariable('lat')).toEqual(LAT.slice(32, 37));
    expect(b.getDataVariable('lon')).toEqual(LON.slice(63, 69));
    // abs:E bounds every value (the bound's definition).
    expect(boxError((b.getDataVariable('rain') as number[][]).flat(), [[0, 2], [1, 3], [2, 7], [3, 9]])).toBeLessThanOrEqual(E);
  });

  it.each(['d-slices.rfz', 'd-matrix.rfz'])('%s: --slices A:B of the leading axes together is written when it is one box (time 1, all depths), refused with the remedy when not', async (archive) => {
    expect((await rfIn(['unpack', archive, '--slices', '3:6', '-o', `t1-${archive}.nc`], t.dir)).code).toBe(0);
    const b = new NetCDFReader(readFileSync(join(t.dir, `t1-${archive}.nc`)));
    expect(b.dimensions.map((d) => [d.name, d.size])).toEqual([['time', 0], ['depth', 3], ['lat', 12], ['lon', 10]]);
    expect(b.getDataVariable('time')).toEqual([20]);
    expect(boxError((b.getDataVariable('rain') as number[][]).flat(), [[1, 2], [0, 3], [0, 12], [0, 10]])).toBeLessThanOrEqual(E);
    // Slices 2..4 are depth 2 of time 0 and depths 0, 1 of time 1: no box.
    expectCliError(await rfIn(['unpack', archive, '--slices', '2:5', '-o', 'x.nc'], t.dir), /slices 2\.\.4 are not one range of each.*give one range per leading axis \(--slices A:B,A:B\)/);
    expectCliError(await rfIn(['unpack', archive, '--slices', '0:1,0:1,0:1', '-o', 'x.nc'], t.dir), /--slices gives 3 ranges, but field 'rain' has 2 leading axes \(time, depth\)/);
  });

  it('--slices A:B,C:D to .npy gives the 4-D box', async () => {
    expect((await rfIn(['unpack', 'd-slices.rfz', '--slices', '1:2,0:2', '-o', 'box4.npy'], t.dir)).code).toBe(0);
    const a = parseNpy(new Uint8Array(readFileSync(join(t.dir, 'box4.npy'))), 'box4.npy');
    expect(a.shape).toEqual([1, 2, 12, 10]);
    expect(boxError(Array.from(a.data), [[1, 2], [0, 2], [0, 12], [0, 10]])).toBeLessThanOrEqual(E);
  });
});
