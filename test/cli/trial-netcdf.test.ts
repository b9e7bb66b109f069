/**
 * `trial` on NetCDF input, told by its first bytes whatever its name: the
 * variable is read as pack reads it (its _FillValue cells are missing), the
 * value range that rel and psnr are resolved against is that of the whole
 * variable's valid values, as netcdfjs 4.0.0 (an independent reader of the
 * classic format) reads them, and an abs bound holds for every sampled value
 * (the bound's definition).
 * Data: test/fixtures/netcdf/corvane-run-classic.nc (see its README): sst is
 * (time 6, lat 24, lon 32), land as _FillValue 1e20.
 */
import { copyFileSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { NetCDFReader } from 'netcdfjs';
import { afterAll, describe, expect, it } from 'vitest';
import { formatNpy } from '../../src/io/npy.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, ROOT, rfIn, tempDir } from './helpers.js';

const FIXTURE = join(ROOT, 'test', 'fixtures', 'netcdf', 'corvane-run-classic.nc');
const { dir, remove } = tempDir();
afterAll(remove);

describe('trial of NetCDF input', { timeout: CLI_TIMEOUT }, () => {
  it('samples the middle slice of a variable of a file named anything, against the whole variable\'s range', async () => {
    ensureBuilt();
    copyFileSync(FIXTURE, join(dir, 'run-output'));
    const r = await rfIn(['trial', 'run-output', '--var', 'sst', '--sample', '16', '--bounds', 'abs:0.01,rel:1e-3', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    const t = JSON.parse(r.stdout);
    expect([t.variable, t.shape, t.dtype]).toEqual(['sst', [6, 24, 32], 'f32']);
    // The middle of 6 slices is slice 3; the central 16 x 16 of 24 x 32 starts at row 4, column 8.
    expect(t.sample).toEqual({ slice: 3, rows: [4, 20], cols: [8, 24], shape: [16, 16], rawBytes: 16 * 16 * 4 });
    const sst = (new NetCDFReader(readFileSync(FIXTURE)).getDataVariable('sst') as number[][]).flat().filter((v) => v !== Math.fround(1e20));
    const lo = sst.reduce((a, b) => Math.min(a, b));
    const hi = sst.reduce((a, b) => Math.max(a, b));
    expect(t.range).toEqual([lo, hi]);
    const [abs, rel] = t.bounds;
    expect(abs.maxErr).toBeLessThanOrEqual(0.01);
    expect(rel.tolerance).toBeCloseTo(1e-3 * (hi - lo), 12); // rel:R is E = R x (max - min)
    expect(rel.maxErr).toBeLessThanOrEqual(rel.tolerance);
  });

  it('takes the first variable of 2 or more dimensions by default, and refuses what does not fit', async () => {
    const r = await rfIn(['trial', FIXTURE, '--sample', '16', '--bounds', 'abs:0.01', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(JSON.parse(r.stdout).variable).toBe('sst');
    expectCliError(await rfIn(['trial', FIXTURE, '--var', 'nothing'], dir), /no variable named 'nothing'/);
    expectCliError(await rfIn(['trial', FIXTURE, '--var', 'lat'], dir), /variable 'lat' has 1 dimension/);
    expectCliError(await rfIn(['trial', FIXTURE, '--shape', '2x3'], dir), /--shape describe raw input/);
    const slice = Float32Array.from((new NetCDFReader(readFileSync(FIXTURE)).getDataVariable('sst') as number[][])[0]);
    writeFileSync(join(dir, 'x.npy'), formatNpy({ data: slice, shape: [24, 32], dtype: 'f32' }));
    expectCliError(await rfIn(['trial', join(dir, 'x.npy'), '--var', 'sst'], dir), /--var applies to NetCDF input; '.*x\.npy' is not NetCDF/);
  });
});
