/**
 * NetCDF in and out through the command line: `pack IN.nc`, `unpack` to
 * .npy, a folder, .nc and .csv, --matrix layouts, and bad input. Fixtures:
 * test/fixtures/netcdf (made by make-fixtures.ts there; see its README).
 * Checks against something outside the project: the original values as read
 * by our reader (itself checked against netcdfjs in test/io), and the .nc
 * output read back with netcdfjs 4.0.0 (reference reader of the classic format).
 */
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { NetCDFReader } from 'netcdfjs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/index.js';
import { parseNpy } from '../../src/io/npy.js';
import { readNetcdfHeader, readNetcdfVariable } from '../../src/io/netcdf-read.js';
import { ROOT, ensureBuilt, expectCliError, leftovers, rf, tempDir } from './helpers.js';

const FIX = join(ROOT, 'test', 'fixtures', 'netcdf');
const CLASSIC = join(FIX, 'corvane-run-classic.nc');
const WIDE = join(FIX, 'corvane-run-64bit.nc');
let t: ReturnType<typeof tempDir>;

beforeAll(() => {
  ensureBuilt();
  t = tempDir('rankfield-nc-');
});
afterAll(() => t.remove());

/** Every value within tol of the original; fill cells (and NaN) bit for bit. */
function expectWithin(got: Float32Array | Float64Array, want: Float32Array | Float64Array, fill: number | null, tol: number): void {
  expect(got.length).toBe(want.length);
  let max = 0;
  for (let i = 0; i < want.length; i++) {
    const w = want[i];
    if (Number.isNaN(w) || (fill !== null && w === fill)) expect(Object.is(got[i], w)).toBe(true);
    else max = Math.max(max, Math.abs(got[i] - w));
  }
  expect(max).toBeLessThanOrEqual(tol);
}

describe.each([
  ['classic', CLASSIC, 'c'],
  ['64-bit-offset', WIDE, 'w'],
])('pack %s NetCDF, unpack to a folder of .npy', (_kind, file, tag) => {
  it('every variable of 2+ dimensions round-trips within its bound, with attributes and dimension names', async () => {
    const out = join(t.dir, `${tag}.rfz`);
    const r = rf(['pack', file, '-o', out, '--bound', 'rel:1e-3'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const bytes = new Uint8Array(readFileSync(file));
    const nc = readNetcdfHeader(bytes, file);
    const want = nc.variables.filter((v) => v.type !== 'char' && v.shape.length >= 2).map((v) => v.name);
    const a = await open(new Uint8Array(readFileSync(out)));
    expect(a.names).toEqual(want);
    // Global attributes carried into the archive's attributes.
    for (const [k, v] of Object.entries(nc.globalAttrs)) expect(a.header.attrs[k]).toEqual(v);
    const dir = join(t.dir, `${tag}-out`);
    const { mkdirSync } = await import('node:fs');
    mkdirSync(dir);
    const u = rf(['unpack', out, '-o', `${dir}/`], t.dir);
    expect(u.code, u.stderr).toBe(0);
    for (const name of want) {
      const orig = readNetcdfVariable(bytes, nc, name);
      const h = a.field(name).header;
      expect(h.dims).toEqual(orig.dims);
      expect(h.nd_shape).toEqual(orig.shape);
      expect(h.attrs.units ?? null).toEqual(orig.attrs.units ?? null);
      if (orig.unpacked) expect(h.attrs['rankfield:unpacked']).toBe(true);
      const npy = parseNpy(new Uint8Array(readFileSync(join(dir, `${name}.npy`))), name);
      expect(npy.shape).toEqual(orig.shape);
      expect(npy.dtype).toBe(orig.dtype);
      expectWithin(npy.data, orig.values, orig.fill, h.bound.tolerance);
    }
  });
});

describe('layouts and outputs', () => {
  it('--matrix time:space stores time x grid-point matrices and restores the original shape', async () => {
    const out = join(t.dir, 'm.rfz');
    const r = rf(['pack', CLASSIC, '-o', out, '--bound', 'abs:0.01', '--matrix', 'time:space', '--var', 'salt', '--var', 'sst'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(new Uint8Array(readFileSync(out)));
    const h = a.field('salt').header;
    expect([h.layout, h.shape, h.slices]).toEqual(['matrix:1', [6, 3 * 24 * 32], undefined]);
    const u = rf(['unpack', out, '--var', 'salt', '-o', 'salt.npy'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    const npy = parseNpy(new Uint8Array(readFileSync(join(t.dir, 'salt.npy'))), 'salt');
    const bytes = new Uint8Array(readFileSync(CLASSIC));
    const orig = readNetcdfVariable(bytes, readNetcdfHeader(bytes), 'salt');
    expect(npy.shape).toEqual([6, 3, 24, 32]);
    expectWithin(npy.data, orig.values, orig.fill, 0.01);
    const show = rf(['show', out], t.dir);
    expect(show.stdout).toMatch(/layout matrix:1/);
  });

  it('unpack -o out.nc gives a NetCDF classic file netcdfjs reads: dims, attributes, fill, values', async () => {
    const out = join(t.dir, 'n.rfz');
    expect(rf(['pack', CLASSIC, '-o', out, '--bound', 'abs:0.01'], t.dir).code).toBe(0);
    const u = rf(['unpack', out, '-o', 'back.nc'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    // netcdfjs 4.0.0, an independent reader of the classic format.
    const back = new NetCDFReader(readFileSync(join(t.dir, 'back.nc')));
    expect(back.version).toBe('classic format'); // netcdfjs names CDF-1 this way
    const bytes = new Uint8Array(readFileSync(CLASSIC));
    const nc = readNetcdfHeader(bytes);
    const sst = back.variables.find((v) => v.name === 'sst')!;
    expect(sst.type).toBe('float');
    expect(sst.dimensions.map((d) => back.dimensions[d].name)).toEqual(['time', 'lat', 'lon']);
    const attr = (name: string) => sst.attributes.find((x) => x.name === name)?.value;
    expect(attr('units')).toBe('degree_Celsius');
    expect(attr('_FillValue')).toBe(Math.fround(1e20));
    // The unlimited dimension: netcdfjs lists its header size (0) and the record count apart.
    expect(back.recordDimension.name).toBe('time');
    expect(back.recordDimension.length).toBe(6);
    expect(back.globalAttributes.find((a) => a.name === 'Conventions')?.value).toBe('CF-1.8');
    const orig = readNetcdfVariable(bytes, nc, 'sst');
    const data = (back.getDataVariable('sst') as unknown as number[][]).flat();
    expectWithin(Float32Array.from(data), orig.values, orig.fill, 0.01);
    // The packed short variable comes back as its physical values, without the packing attributes.
    const ssh = back.variables.find((v) => v.name === 'ssh')!;
    expect(ssh.type).toBe('double');
    expect(ssh.attributes.some((a) => a.name === 'scale_factor')).toBe(false);
  });

  it('--slices with --region writes a small .csv; a large one is refused without --force', () => {
    const out = join(t.dir, 's.rfz');
    expect(rf(['pack', CLASSIC, '-o', out, '--bound', 'abs:0.01', '--var', 'sst'], t.dir).code).toBe(0);
    const u = rf(['unpack', out, '--slices', '1:3', '--region', '0:2,0:3', '-o', 'w.csv'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    const lines = readFileSync(join(t.dir, 'w.csv'), 'utf8').trimEnd().split('\n');
    expect(lines[0]).toBe('time,lat,lon,value');
    expect(lines).toHaveLength(1 + 2 * 2 * 3);
  });
});

describe('bad NetCDF input: one line, exit 2, no output', () => {
  const cases: [string, string[], RegExp][] = [
    ['a non-NetCDF file', [join(FIX, 'not-netcdf.nc')], /not a NetCDF file/],
    ['a truncated NetCDF file', [join(FIX, 'truncated.nc')], /truncated/],
    ['an unknown --var', [CLASSIC, '--var', 'nope'], /no variable named 'nope'/],
    ['a 1-D variable', [CLASSIC, '--var', 'station_lat'], /1 dimension/],
    ['a char variable', [CLASSIC, '--var', 'station_name'], /text \(char\)/],
  ];
  it.each(cases)('%s', (_what, args, pattern) => {
    const r = rf(['pack', ...args, '-o', 'bad.rfz', '--bound', 'abs:1'], t.dir);
    expectCliError(r, pattern);
    expect(existsSync(join(t.dir, 'bad.rfz'))).toBe(false);
    expect(leftovers(t.dir)).toEqual([]);
    expect(readdirSync(t.dir).filter((n) => n.startsWith('bad'))).toEqual([]);
  });
});
