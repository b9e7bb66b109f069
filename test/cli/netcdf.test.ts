/**
 * NetCDF in and out through the command line: `pack IN.nc`, `unpack` to
 * .npy, a folder, .nc and .csv, --matrix layouts, what pack says of each
 * variable and of the choices it made itself, and bad input. Fixtures:
 * test/fixtures/netcdf (made by make-fixtures.ts there; see its README).
 * Checks against something outside the project: the original values as read
 * by our reader (itself checked against netcdfjs in test/io), and the .nc
 * output read back with netcdfjs 4.0.0 (reference reader of the classic format).
 */
import { existsSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { NetCDFReader } from 'netcdfjs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/index.js';
import { parseNpy } from '../../src/io/npy.js';
import { readNetcdfHeader, readNetcdfVariable, type NcFile, type NcVariable } from '../../src/io/netcdf-read.js';
import { writeNetcdf } from '../../src/io/netcdf-write.js';
import { NC_TYPE_SIZE } from '../../src/io/netcdf-types.js';
import { CLI_TIMEOUT, ROOT, ensureBuilt, expectCliError, leftovers, rfIn, tempDir, type RunResult } from './helpers.js';

const FIX = join(ROOT, 'test', 'fixtures', 'netcdf');
const CLASSIC = join(FIX, 'corvane-run-classic.nc');
const WIDE = join(FIX, 'corvane-run-64bit.nc');
let t: ReturnType<typeof tempDir>;

beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-nc-');
});
afterAll(() => t.remove());

/**
 * A pack of a NetCDF fixture without --layout and --tile runs the layout and
 * tile trials (samples of every candidate packed): about 8 s of CPU for the
 * classic fixture, and its wall time grows with the machine's load. So each
 * fixture is packed under rel:1e-3 once, shared by the tests that read that
 * archive back, and these tests get PACK_TIMEOUT. The classic fixture goes
 * through the trials (its archive holds matrix layouts, and 'in words' below
 * checks what pack says of its choices); the 64-bit-offset one, where the
 * file format is the point, gets a fixed layout and tile (2 s of CPU, not 6).
 */
const PACK_TIMEOUT = 120_000;
const FIXED: Record<string, string[]> = { [WIDE]: ['--layout', 'slices', '--tile', '24x32'] };
const packed = new Map<string, { out: string; r: RunResult }>();
async function packOnce(file: string, tag: string): Promise<{ out: string; r: RunResult }> {
  let got = packed.get(file);
  if (got === undefined) {
    const out = join(t.dir, `${tag}.rfz`);
    got = { out, r: await rfIn(['pack', file, '-o', out, '--bound', 'rel:1e-3', ...(FIXED[file] ?? [])], t.dir) };
    packed.set(file, got);
  }
  return got;
}

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
])('pack %s NetCDF, unpack to a folder of .npy', { timeout: PACK_TIMEOUT }, (_kind, file, tag) => {
  it('every variable of 2+ dimensions round-trips within its bound, with attributes and dimension names', async () => {
    const { out, r } = await packOnce(file, tag);
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
    const u = await rfIn(['unpack', out, '-o', `${dir}/`], t.dir);
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

/** The stored bytes of a variable, record slabs joined (located by our reader's header: begin, record size). */
function storedBytes(bytes: Uint8Array, file: NcFile, v: NcVariable): Uint8Array {
  const slab = (v.isRecord ? v.shape.slice(1) : v.shape).reduce((a, b) => a * b, 1) * NC_TYPE_SIZE[v.type];
  const records = v.isRecord ? v.shape[0] : 1;
  const out = new Uint8Array(slab * records);
  for (let r = 0; r < records; r++) out.set(bytes.subarray(v.begin + r * file.recordSize, v.begin + r * file.recordSize + slab), r * slab);
  return out;
}

describe.each([
  ['classic', CLASSIC, 'c'],
  ['64-bit-offset', WIDE, 'w'],
])('pack %s NetCDF, unpack -o out.nc: everything restored', { timeout: PACK_TIMEOUT }, (_kind, file, tag) => {
  it('netcdfjs finds every variable, dimension and global attribute; 1-D and char variables are bit-identical', async () => {
    const { out, r } = await packOnce(file, tag);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/carried losslessly \(not packed as fields\): time, depth, lat, lon, station_name, station_lat/);
    const show = await rfIn(['show', out], t.dir);
    expect(show.stdout).toMatch(/carried +losslessly .*: time, depth, lat, lon, station_name, station_lat\n/);
    const u = await rfIn(['unpack', out, '-o', `all-${tag}.nc`], t.dir);
    expect(u.code, u.stderr).toBe(0);
    const origBytes = new Uint8Array(readFileSync(file));
    const backBytes = new Uint8Array(readFileSync(join(t.dir, `all-${tag}.nc`)));
    // netcdfjs 4.0.0, an independent reader of the classic format, on both files.
    const a = new NetCDFReader(origBytes);
    const b = new NetCDFReader(backBytes);
    expect(b.variables.map((v) => v.name)).toEqual(a.variables.map((v) => v.name));
    // netcdfjs lists the unlimited dimension with size 0 and its record count apart.
    expect(b.dimensions).toEqual(a.dimensions);
    expect(b.recordDimension.length).toBe(a.recordDimension.length);
    expect(b.recordDimension.name).toBe(a.recordDimension.name);
    // Every global attribute as it was, except history, which gains one line saying the values are
    // from a lossy archive (NetCDF Users Guide, attribute conventions: programs append to history; from memory).
    const history = (x: typeof a) => x.globalAttributes.find((g) => g.name === 'history')?.value as string;
    expect(b.globalAttributes.filter((g) => g.name !== 'history')).toEqual(a.globalAttributes.filter((g) => g.name !== 'history'));
    const lines = history(b).split('\n');
    expect(lines.slice(0, -1).join('\n')).toBe(history(a));
    expect(lines.at(-1)).toMatch(/^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ rankfield \S+ unpack: values decoded from a lossy archive \(sst rel:0\.001, .*\), within those bounds of the originals, not the originals$/);
    const na = readNetcdfHeader(origBytes);
    const nb = readNetcdfHeader(backBytes);
    const carried = na.variables.filter((v) => v.type === 'char' || v.shape.length < 2);
    expect(carried.map((v) => v.name)).toEqual(['time', 'depth', 'lat', 'lon', 'station_name', 'station_lat']);
    for (const v of carried) {
      const w = nb.variables.find((x) => x.name === v.name)!;
      expect([w.type, w.dims, w.shape, w.isRecord]).toEqual([v.type, v.dims, v.shape, v.isRecord]);
      expect(w.attrs).toEqual(v.attrs);
      expect(w.attrTypes).toEqual(v.attrTypes);
      // Bit for bit: the stored bytes of the data (padding aside).
      expect(Buffer.from(storedBytes(backBytes, nb, w)).equals(Buffer.from(storedBytes(origBytes, na, v))), v.name).toBe(true);
      // And what netcdfjs reads (none of these is NC_BYTE, whose sign netcdfjs drops).
      const va = a.variables.find((x) => x.name === v.name)!;
      const vb = b.variables.find((x) => x.name === v.name)!;
      expect(vb.attributes).toEqual(va.attributes);
      expect(b.getDataVariable(v.name)).toEqual(a.getDataVariable(v.name));
    }
  });
});

describe('carried variables: edge values and limits', { timeout: CLI_TIMEOUT }, () => {
  it('-0, NaN, infinities, float32 values, scalars and text come back bit for bit', async () => {
    const f32 = new Uint32Array([0x80000000, 0x7fc00000, 0x7f800000, 0xff800000, 0x3f8ccccd, 0x00000001, 0x7f7fffff, 0xffc00000]);
    const f64 = new Float64Array([-0, NaN, Infinity, -Infinity, 0.1, 5e-324, Number.MAX_VALUE, 1 / 3]);
    const grid = new Float32Array(8 * 8).map((_, i) => Math.sin(i));
    const nc = writeNetcdf({
      dims: [{ name: 'x', size: 8 }, { name: 'y', size: 8 }, { name: 'n', size: 5 }, { name: 'unused', size: 2 }],
      globalAttrs: { note: 'edge values' },
      variables: [
        { name: 'f', dims: ['x'], type: 'float', attrs: { _FillValue: NaN, units: 'm' }, values: new Float32Array(f32.buffer) },
        { name: 'd', dims: ['y'], type: 'double', attrs: { valid_range: [-Infinity, Infinity] }, values: f64 },
        { name: 'k', dims: [], type: 'int', attrs: {}, values: [-2147483648] },
        { name: 'b', dims: ['n'], type: 'byte', attrs: {}, values: [-128, -1, 0, 1, 127] },
        { name: 's', dims: ['n'], type: 'short', attrs: {}, values: [-32768, -1, 0, 1, 32767] },
        { name: 'label', dims: ['n'], type: 'char', attrs: {}, values: Uint8Array.of(0x41, 0, 0xff, 0x0a, 0x22) },
        { name: 'grid', dims: ['x', 'y'], type: 'float', attrs: {}, values: grid },
      ],
    });
    writeFileSync(join(t.dir, 'edge.nc'), nc);
    const p = await rfIn(['pack', 'edge.nc', '-o', 'edge.rfz', '--bound', 'abs:0.01'], t.dir);
    expect(p.code, p.stderr).toBe(0);
    const u = await rfIn(['unpack', 'edge.rfz', '-o', 'edge-back.nc'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    const back = new Uint8Array(readFileSync(join(t.dir, 'edge-back.nc')));
    const na = readNetcdfHeader(nc);
    const nb = readNetcdfHeader(back);
    expect(nb.dims).toEqual(na.dims);
    expect(nb.variables.map((v) => v.name)).toEqual(na.variables.map((v) => v.name));
    for (const name of ['f', 'd', 'k', 'b', 's', 'label']) {
      const v = na.variables.find((x) => x.name === name)!;
      const w = nb.variables.find((x) => x.name === name)!;
      expect([w.type, w.dims]).toEqual([v.type, v.dims]);
      expect(Object.is(w.attrs._FillValue, v.attrs._FillValue)).toBe(true);
      expect(w.attrs).toEqual(v.attrs);
      expect(Buffer.from(storedBytes(back, nb, w)).equals(Buffer.from(storedBytes(nc, na, v))), name).toBe(true);
    }
    // netcdfjs reads the same float bits: -0 stays negative (IEEE 754 signed zero).
    const ref = new NetCDFReader(back);
    expect(Object.is((ref.getDataVariable('f') as number[])[0], -0)).toBe(true);
  });

  it('a variable too large to carry is refused, naming it, with no output', async () => {
    const big = new Float64Array(100_000).map((_, i) => Math.sqrt(i + 0.5));
    const nc = writeNetcdf({
      dims: [{ name: 'x', size: 100_000 }, { name: 'r', size: 4 }, { name: 'c', size: 4 }],
      globalAttrs: {},
      variables: [
        { name: 'long_axis', dims: ['x'], type: 'double', attrs: {}, values: big },
        { name: 'grid', dims: ['r', 'c'], type: 'double', attrs: {}, values: new Float64Array(16) },
      ],
    });
    writeFileSync(join(t.dir, 'bigaxis.nc'), nc);
    const r = await rfIn(['pack', 'bigaxis.nc', '-o', 'bad-big.rfz', '--bound', 'abs:1'], t.dir);
    expectCliError(r, /variable 'long_axis' \(double, 100000\) .* more than the 1048576/);
    expect(existsSync(join(t.dir, 'bad-big.rfz'))).toBe(false);
    expect(leftovers(t.dir)).toEqual([]);
  });
});

describe('pack of several variables, in words', { timeout: PACK_TIMEOUT }, () => {
  it('prints each variable\'s size and ratio, and the tile shape, layout and threads it chose', async () => {
    const { out, r } = await packOnce(CLASSIC, 'c');
    expect(r.code, r.stderr).toBe(0);
    const archive = await open(readFileSync(out));
    const ix = await archive.loadIndex();
    archive.header.fields.forEach((h, i) => {
      const bytes = ix.fields[i].length.reduce((a, b) => a + b, 0);
      // Bytes in are counted in the variable's stored type (ssh is stored as short and unpacked to float64).
      const stored = { byte: 1, short: 2, int: 4, float: 4, double: 8 }[h.attrs['rankfield:nc_type'] as string] ?? (h.dtype === 'f32' ? 4 : 8);
      const raw = (h.slices ?? 1) * h.shape[0] * h.shape[1] * stored;
      expect(r.stdout).toMatch(new RegExp(`\\n  ${h.name} \\(.*, layout ${h.layout ?? 'plain'}: [0-9.]+ (bytes|kB), ratio ${(raw / bytes).toFixed(2)}; `));
    });
    expect(r.stdout).toMatch(/\n  tile .* \(chosen automatically: the shape that packed smallest on a sample; --tile fixes it\)/);
    expect(r.stdout).toMatch(/\n  layout .* \(chosen automatically: the layout that packed smallest on a sample/);
    expect(r.stdout).toMatch(/\n  threads 1 \(chosen automatically: /);
    const fixed = await rfIn(['pack', CLASSIC, '-o', 'nc2.rfz', '--bound', 'rel:1e-3', '--tile', '24', '--layout', 'slices', '--threads', '1'], t.dir);
    expect(fixed.code, fixed.stderr).toBe(0);
    expect(fixed.stdout).not.toContain('chosen automatically');
  });
});

describe('layouts and outputs', { timeout: PACK_TIMEOUT }, () => {
  it('--matrix time:space stores time x grid-point matrices and restores the original shape', async () => {
    const out = join(t.dir, 'm.rfz');
    // A fixed tile (the layout is the point here, not the tile trial, which packOnce's archives go through).
    const r = await rfIn(['pack', CLASSIC, '-o', out, '--bound', 'abs:0.01', '--matrix', 'time:space', '--var', 'salt', '--var', 'sst', '--tile', '6x256'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(new Uint8Array(readFileSync(out)));
    const h = a.field('salt').header;
    expect([h.layout, h.shape, h.slices]).toEqual(['matrix:1', [6, 3 * 24 * 32], undefined]);
    const u = await rfIn(['unpack', out, '--var', 'salt', '-o', 'salt.npy'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    const npy = parseNpy(new Uint8Array(readFileSync(join(t.dir, 'salt.npy'))), 'salt');
    const bytes = new Uint8Array(readFileSync(CLASSIC));
    const orig = readNetcdfVariable(bytes, readNetcdfHeader(bytes), 'salt');
    expect(npy.shape).toEqual([6, 3, 24, 32]);
    expectWithin(npy.data, orig.values, orig.fill, 0.01);
    const show = await rfIn(['show', out], t.dir);
    expect(show.stdout).toMatch(/layout matrix:1/);
  });

  it('unpack -o out.nc gives a NetCDF classic file netcdfjs reads: dims, attributes, fill, values', async () => {
    const out = join(t.dir, 'n.rfz');
    // A fixed layout and tile shape: what is checked is the .nc written back, not the trials (packOnce's archives go through them).
    expect((await rfIn(['pack', CLASSIC, '-o', out, '--bound', 'abs:0.01', '--layout', 'slices', '--tile', '24x32'], t.dir)).code).toBe(0);
    const u = await rfIn(['unpack', out, '-o', 'back.nc'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    // netcdfjs 4.0.0, an independent reader of the classic format.
    const back = new NetCDFReader(readFileSync(join(t.dir, 'back.nc')));
    expect(back.version).toBe('classic format'); // netcdfjs names CDF-1 this way
    const bytes = new Uint8Array(readFileSync(CLASSIC));
    const nc = readNetcdfHeader(bytes);
    const sst = back.variables.find((v) => v.name === 'sst')!;
    expect(sst.type).toBe('float');
    expect(sst.dimensions.map((d) => back.dimensions[d].name)).toEqual(['time', 'lat', 'lon']);
    // netcdfjs 4.0.0 declares a variable's `attributes` as `[]`; at run time they are its `Attribute`s.
    const varAttributes = (v: { attributes: [] }) => v.attributes as unknown as { name: string; value: number | string }[];
    const attr = (name: string) => varAttributes(sst).find((x) => x.name === name)?.value;
    expect(attr('units')).toBe('degree_Celsius');
    expect(attr('_FillValue')).toBe(Math.fround(1e20));
    // The unlimited dimension: netcdfjs lists its header size (0) and the record count apart.
    expect(back.recordDimension.name).toBe('time');
    expect(back.recordDimension.length).toBe(6);
    expect(back.globalAttributes.find((a) => a.name === 'Conventions')?.value).toBe('CF-1.8');
    const orig = readNetcdfVariable(bytes, nc, 'sst');
    const data = (back.getDataVariable('sst') as unknown as number[][]).flat();
    expectWithin(Float32Array.from(data), orig.values, orig.fill, 0.01);
    // The packed short variable comes back in its stored type, with its packing attributes (CF 1.x section 8.1, from memory).
    const ssh = back.variables.find((v) => v.name === 'ssh')!;
    const origSsh = new NetCDFReader(bytes).variables.find((v) => v.name === 'ssh')!;
    expect(ssh.type).toBe('short');
    expect(varAttributes(ssh)).toEqual(varAttributes(origSsh));
  });

  it('--slices with --region writes a small .csv; a large one is refused without --force', async () => {
    const out = join(t.dir, 's.rfz');
    expect((await rfIn(['pack', CLASSIC, '-o', out, '--bound', 'abs:0.01', '--var', 'sst', '--layout', 'slices', '--tile', '24x32'], t.dir)).code).toBe(0);
    const u = await rfIn(['unpack', out, '--slices', '1:3', '--region', '0:2,0:3', '-o', 'w.csv'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    const lines = readFileSync(join(t.dir, 'w.csv'), 'utf8').trimEnd().split('\n');
    expect(lines[0]).toBe('time,lat,lon,value');
    expect(lines).toHaveLength(1 + 2 * 2 * 3);
  });
});

describe('bad NetCDF input: one line, exit 2, no output', { timeout: CLI_TIMEOUT }, () => {
  const cases: [string, string[], RegExp][] = [
    ['a non-NetCDF file', [join(FIX, 'not-netcdf.nc')], /not a NetCDF file/],
    ['a truncated NetCDF file', [join(FIX, 'truncated.nc')], /truncated/],
    ['an unknown --var', [CLASSIC, '--var', 'nope'], /no variable named 'nope'/],
    ['a 1-D variable', [CLASSIC, '--var', 'station_lat'], /1 dimension/],
    ['a char variable', [CLASSIC, '--var', 'station_name'], /text \(char\)/],
  ];
  it.each(cases)('%s', async (_what, args, pattern) => {
    const r = await rfIn(['pack', ...args, '-o', 'bad.rfz', '--bound', 'abs:1'], t.dir);
    expectCliError(r, pattern);
    expect(existsSync(join(t.dir, 'bad.rfz'))).toBe(false);
    expect(leftovers(t.dir)).toEqual([]);
    expect(readdirSync(t.dir).filter((n) => n.startsWith('bad'))).toEqual([]);
  });
});
