/**
 * --json, --quiet and progress bars on the NetCDF and N-D paths: pack of
 * NetCDF variables (a bar per variable, the summary per variable, the
 * choices in JSON), check --against a NetCDF file (one result per variable),
 * unpack --netcdf4 and unpack --where, pack and trial of an N-D .npy.
 * Data: the invented Corvane Basin run of test/fixtures/netcdf (see its
 * README); R's datasets::volcano (vega-datasets data/volcano.json), stacked
 * four times into a 4 x 61 x 87 array, slice k its values shifted by 1000 k
 * cells (in row-major order) and raised by 10 k.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { main } from '../../src/cli/main.js';
import { pack } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { CLI_TIMEOUT, ensureBuilt, ROOT, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir();
const at = (name: string) => join(dir, name);
const NC = join(ROOT, 'test', 'fixtures', 'netcdf', 'corvane-run-classic.nc');
const vol = volcano();
const [R, C] = vol.shape;
/** Slice k of the stack, as a row-major R x C array. */
const slice = (k: number) => Float64Array.from({ length: R * C }, (_, i) => vol.values[(i + 1000 * k) % (R * C)] + 10 * k);
const stack = new Float64Array(4 * R * C);
for (let k = 0; k < 4; k++) stack.set(slice(k), k * R * C);
const BAR = /\[[-=]+\] \d+\/\d+ tiles \| [-0-9.]+ MB\/s \| \S+ left/;

/** Run the command line in this process, with stderr said to be (or not to be) a terminal. */
async function run(args: string[], tty = false): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const code = await main(args, { out: (s) => void (out += s), err: (s) => void (err += s), errTTY: tty, errColumns: 100 });
  return { code, out, err };
}

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(at('stack.npy'), formatNpy({ data: stack, shape: [4, R, C], dtype: 'f64' }));
  const r = await run(['pack', NC, '-o', at('nc.rfz'), '--bound', 'rel:1e-3', '--var', 'sst', '--var', 'ssh', '--tile', '16', '--layout', 'slices', '--threads', '1']);
  expect(r.code, r.err).toBe(0);
});
afterAll(remove);

describe('NetCDF and N-D input with --json, --quiet and bars', { timeout: CLI_TIMEOUT }, () => {
  it('pack of NetCDF variables: a bar per variable on a terminal, the summary per variable, one JSON object, nothing with --quiet', async () => {
    const args = ['pack', NC, '-o', at('p.rfz'), '--bound', 'rel:1e-3', '--var', 'sst', '--var', 'ssh', '--tile', '16', '--layout', 'slices', '--threads', '1', '--force'];
    const tty = await run(args, true);
    expect(tty.code, tty.err).toBe(0);
    expect(tty.err).toMatch(new RegExp(`packing 'sst' ${BAR.source}`));
    expect(tty.err).toMatch(new RegExp(`packing 'ssh' ${BAR.source}`));
    expect(tty.out).toMatch(/^packed 2 variables of .*\n {2}sst \(time, lat, lon\) 6x24x32 f32, layout slices: .*\n {2}ssh \(time, lat, lon\) 6x24x32 f64, layout slices: /);
    expect(tty.out).toMatch(/\n {2}layout slices\n/);
    expect(tty.out).toMatch(/\n {2}sst: bytes: \d+% low-rank factors/);
    const json = await run([...args, '--json']);
    expect([json.code, json.err]).toEqual([0, '']);
    const j = JSON.parse(json.out);
    expect(j.choices).toEqual({ tile: 'given', layout: 'given', threads: 1, threadsAuto: false });
    expect(j.archive.fields.map((f: { name: string }) => f.name)).toEqual(['sst', 'ssh']);
    expect(j.archive.fileBytes).toBe(readFileSync(at('p.rfz')).length);
    expect(await run([...args, '--quiet'], true)).toEqual({ code: 0, out: '', err: '' });
  });

  it('check --against a NetCDF file: the JSON object reports each variable compared; --var narrows it; a bar on a terminal', async () => {
    const all = await run(['check', at('nc.rfz'), '--against', NC, '--json']);
    expect([all.code, all.err]).toEqual([0, '']);
    const j = JSON.parse(all.out);
    expect(j.compared).toEqual(['sst', 'ssh']);
    expect(j.ok).toBe(true);
    for (const f of j.fields) {
      expect(f.measured, f.name).toBeDefined();
      expect(f.measured.specialMismatches).toBe(0);
      expect(f.measured.maxErr).toBeLessThanOrEqual(f.tolerance);
    }
    const one = JSON.parse((await run(['check', at('nc.rfz'), '--against', NC, '--var', 'ssh', '--json'])).out);
    expect(one.compared).toEqual(['ssh']);
    expect(one.field).toBe('ssh');
    expect(one.fields.map((f: { name: string; measured?: unknown }) => [f.name, f.measured !== undefined])).toEqual([
      ['sst', false],
      ['ssh', true],
    ]);
    const tty = await run(['check', at('nc.rfz'), '--against', NC], true);
    expect(tty.code, tty.err).toBe(0);
    expect(tty.err).toMatch(BAR);
    expect(tty.out).toMatch(/against '.*corvane-run-classic\.nc' \(fields 'sst', 'ssh'\)/);
    expect(await run(['check', at('nc.rfz'), '--against', NC, '--quiet'], true)).toEqual({ code: 0, out: '', err: '' });
  });

  it('unpack --netcdf4 and unpack --where: one JSON object each, nothing with --quiet', async () => {
    const nc4 = await run(['unpack', at('nc.rfz'), '-o', at('back4.nc'), '--netcdf4', '--json']);
    expect([nc4.code, nc4.err]).toEqual([0, '']);
    const j = JSON.parse(nc4.out);
    expect(j.format).toBe('netcdf4');
    const bytes = readFileSync(at('back4.nc'));
    expect(j.files).toEqual([{ path: at('back4.nc'), bytes: bytes.length, fields: ['sst', 'ssh'] }]);
    // The HDF5 format signature (HDF5 File Format Specification, section II.A).
    expect([...bytes.subarray(0, 8)]).toEqual([0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a]);
    expect(await run(['unpack', at('nc.rfz'), '-o', at('back4.nc'), '--netcdf4', '--force', '--quiet'])).toEqual({ code: 0, out: '', err: '' });
    // lat 42..43 are indices 4..8, lon -10..-9 indices 8..12 (0.25 degree steps from 41 and -12).
    const where = await run(['unpack', at('nc.rfz'), '--var', 'sst', '--where', 'lat=42:43,lon=-10:-9', '-o', at('box.npy'), '--json']);
    expect([where.code, where.err]).toEqual([0, '']);
    const w = JSON.parse(where.out);
    expect(w.format).toBe('npy');
    expect(w.shape).toEqual([6, 5, 5]);
    expect(w.window).toBeNull();
    expect(w.axes).toEqual([
      { name: 'time', range: [0, 6] },
      { name: 'lat', range: [4, 9] },
      { name: 'lon', range: [8, 13] },
    ]);
    expect(await run(['unpack', at('nc.rfz'), '--var', 'sst', '--where', 'lat=42:43', '-o', at('box.npy'), '--force', '--quiet'])).toEqual({ code: 0, out: '', err: '' });
  });

  it('pack of an N-D .npy names its default layout; trial samples the middle slice against the whole array\'s range', async () => {
    const p = await run(['pack', at('stack.npy'), '-o', at('s.rfz'), '--bound', 'abs:1', '--tile', '16', '--threads', '1']);
    expect(p.code, p.err).toBe(0);
    expect(p.out).toMatch(/\(4x61x87 f64, field 'stack', layout slices\)/);
    expect(p.out).toMatch(/\n {2}layout slices \(the default for \.npy and raw arrays of 3\+ axes; --matrix lays them out as a matrix\)\n/);
    const pj = JSON.parse((await run(['pack', at('stack.npy'), '-o', at('s.rfz'), '--bound', 'abs:1', '--tile', '16', '--threads', '1', '--force', '--json'])).out);
    expect(pj.choices.layout).toBe('default');
    const mj = JSON.parse((await run(['pack', at('stack.npy'), '-o', at('m.rfz'), '--bound', 'abs:1', '--matrix', 'axis0:space', '--threads', '1', '--json'])).out);
    expect(mj.choices.layout).toBe('given');
    const t = await run(['trial', at('stack.npy'), '--sample', '32', '--bounds', 'abs:1', '--tile', '16', '--json']);
    expect([t.code, t.err]).toEqual([0, '']);
    const tj = JSON.parse(t.out);
    expect(tj.shape).toEqual([4, R, C]);
    expect(tj.sample).toEqual({ slice: 2, rows: [14, 46], cols: [27, 59], shape: [32, 32], rawBytes: 32 * 32 * 8 });
    // The range of the whole array: volcano's 94..195, the last slice raised by 30.
    expect(tj.range).toEqual([94, 225]);
    expect(tj.bounds[0].maxErr).toBeLessThanOrEqual(1);
    // The sample is the centre of slice 2: packing that block gives the bytes trial reports (and the same block of slice 0 does not).
    const centre = (k: number) => {
      const s = slice(k);
      const out = new Float64Array(32 * 32);
      for (let i = 0; i < 32; i++) out.set(s.subarray((14 + i) * C + 27, (14 + i) * C + 59), i * 32);
      return out;
    };
    expect(tj.bounds[0].bytes).toBe(pack(centre(2), [32, 32], { bound: 'abs:1', tile: 16, name: 'sample' }).length);
    expect(tj.bounds[0].bytes).not.toBe(pack(centre(0), [32, 32], { bound: 'abs:1', tile: 16, name: 'sample' }).length);
    const text = await run(['trial', at('stack.npy'), '--sample', '32', '--bounds', 'abs:1', '--tile', '16']);
    expect(text.out).toMatch(/trial of '.*stack\.npy' \(4x61x87 f64, valid range \[94, 225\]\): sample 32 x 32 \(slice 2, rows 14\.\.45, columns 27\.\.58\)/);
  });
});
