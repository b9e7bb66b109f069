/**
 * NetCDF input read a band at a time (issue 15): a classic file's header is
 * read alone and a variable's rows by positioned reads of exactly their
 * bytes (record variables interleaved); a NetCDF-4 file's variables by
 * hyperslabs through h5wasm, with the header the whole-file conversion
 * gives; and pack, check, trial and preview read them so, giving the same
 * archives and reports as reads of whole variables.
 */
import { execFileSync } from 'node:child_process';
import { readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ArchiveBuilder, chooseLayout, open, parseBound, type BandOriginal, type FloatArray } from '../../src/index.js';
import { MemorySink } from '../../src/format/container.js';
import { flatPieces, MAX_CHUNK_BYTES, netcdf4ToClassic, openNetcdf4Input } from '../../src/io/hdf5-read.js';
import { valueBytes } from '../../src/io/bands.js';
import { npyHeader } from '../../src/io/npy.js';
import { classicInput, openClassicInput, type NetcdfInput } from '../../src/io/netcdf-input.js';
import { NcVariableReader, readNetcdfHeader, readNetcdfVariable } from '../../src/io/netcdf-read.js';
import { writeNetcdf, type NcWriteFile } from '../../src/io/netcdf-write.js';
import { fieldBands, netcdfFields } from '../../src/cli/netcdf.js';
import { netcdfSample } from '../../src/cli/trial.js';
import { readGrids, slicePlane } from '../../src/picture/sample.js';
import { haveNetcdfBin, NCCOPY } from '../cdl.js';
import { CLI_TIMEOUT, ensureBuilt, rfIn, tempDir } from '../cli/helpers.js';

const NC = haveNetcdfBin('the NetCDF-4 band-reading tests');
const T = 5;
const Y = 40;
const X = 30;

/** A file with a record variable interleaved with another, a packed short with two missing values, a fixed 3-D double, a coordinate and text. */
function model(): NcWriteFile {
  let seed = 7;
  const rnd = () => (seed = (seed * 16807) % 2147483647) / 2147483647;
  const temp = new Float32Array(T * Y * X);
  for (let k = 0; k < temp.length; k++) temp[k] = 280 + 10 * Math.sin(k / 97) + rnd() * 0.01;
  temp[5] = -999;
  const press = new Int16Array(T * Y * X);
  for (let k = 0; k < press.length; k++) press[k] = Math.round(1000 * Math.sin(k / 500) + rnd() * 20);
  press[3] = -32767;
  press[10] = 32000;
  const deep = new Float64Array(6 * 20 * 16);
  for (let k = 0; k < deep.length; k++) deep[k] = Math.cos(k / 100) * 5 + rnd() * 1e-3;
  return {
    dims: [
      { name: 'time', size: T, unlimited: true },
      { name: 'y', size: Y },
      { name: 'x', size: X },
      { name: 'z', size: 6 },
      { name: 'a', size: 20 },
      { name: 'b', size: 16 },
      { name: 'n', size: 4 },
    ],
    globalAttrs: { title: 'bands' },
    variables: [
      { name: 'time', dims: ['time'], type: 'double', attrs: { units: 'days since 2000-01-01' }, values: Float64Array.from({ length: T }, (_, i) => i) },
      { name: 'y', dims: ['y'], type: 'float', attrs: { units: 'km' }, values: Float32Array.from({ length: Y }, (_, i) => i * 2.5) },
      { name: 'temp', dims: ['time', 'y', 'x'], type: 'float', attrs: { units: 'K', _FillValue: -999 }, values: temp },
      { name: 'press', dims: ['time', 'y', 'x'], type: 'short', attrs: { scale_factor: 0.01, add_offset: 1000, _FillValue: -32767, missing_value: [-32767, 32000] }, attrTypes: { scale_factor: 'float', add_offset: 'float' }, values: press },
      { name: 'deep', dims: ['z', 'a', 'b'], type: 'double', attrs: {}, values: deep },
      { name: 'label', dims: ['n'], type: 'char', attrs: {}, values: new Uint8Array([65, 66, 67, 0]) },
    ],
  };
}

let t: ReturnType<typeof tempDir>;
let classic: string;
let bytes: Uint8Array;
beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-ncbands-');
  bytes = writeNetcdf(model());
  classic = join(t.dir, 'run.nc');
  writeFileSync(classic, bytes);
});
afterAll(() => t?.remove());

/** A NetCDF input whose stored reads are recorded (count of values per read). */
function counted(nc: NetcdfInput): { nc: NetcdfInput; reads: number[] } {
  const reads: number[] = [];
  const stored: NetcdfInput['stored'] = (v, start, count, unsigned, out) => {
    reads.push(count);
    nc.stored(v, start, count, unsigned, out);
  };
  return {
    reads,
    nc: {
      path: nc.path,
      file: nc.file,
      stored,
      bytesRead: 0,
      storedBits: (v) => nc.storedBits(v),
      variable: (name, options) => new NcVariableReader(stored, nc.file, name, options),
      close: () => nc.close(),
    },
  };
}

describe('classic files read by positioned reads', () => {
  it('opening reads the header alone; a band of rows reads exactly its bytes, records interleaved or not', async () => {
    const nc = openClassicInput(classic);
    try {
      // The header is read from a prefix of at most 64 KiB (and the HDF5 signature probes, 8 bytes each).
      expect(nc.bytesRead).toBeLessThanOrEqual(Math.min(statSync(classic).size, 1 << 16) + 4 + 8 * 13);
      expect(nc.file).toEqual(readNetcdfHeader(bytes, classic));
      for (const name of ['temp', 'press', 'deep']) {
        const whole = readNetcdfVariable(bytes, nc.file, name, undefined, { mark: true });
        const r = nc.variable(name, { mark: true });
        const [rows, cols] = r.shape;
        const size = name === 'deep' ? 8 : name === 'temp' ? 4 : 2;
        // Bands that cross a record (or slice) boundary, and one partial run.
        for (const [r0, count] of [[0, 3], [Y - 2, 5], [rows - 7, 7]]) {
          const before = nc.bytesRead;
          const got = r.rows(r0, count);
          expect(nc.bytesRead - before).toBe(count * cols * size);
          expect(Array.from(got)).toEqual(Array.from(whole.values.subarray(r0 * cols, (r0 + count) * cols)));
        }
        const before = nc.bytesRead;
        const run = r.values(cols + 3, 2 * cols - 5);
        expect(nc.bytesRead - before).toBe((2 * cols - 5) * size);
        expect(Array.from(run)).toEqual(Array.from(whole.values.subarray(cols + 3, 3 * cols - 2)));
      }
    } finally {
      nc.close();
    }
  });

  it('flatPieces cuts a run of C-order positions into at most two hyperslabs per axis', async () => {
    const shape = [3, 4, 5];
    for (const [start, count] of [[0, 60], [7, 31], [20, 20], [3, 1], [19, 2], [0, 5], [55, 5]]) {
      const pieces = flatPieces(shape, start, count);
      expect(pieces.length).toBeLessThanOrEqual(2 * shape.length - 1);
      const seen: number[] = [];
      for (const p of pieces) {
        for (let i = p[0][0]; i < p[0][1]; i++) for (let j = p[1][0]; j < p[1][1]; j++) for (let k = p[2][0]; k < p[2][1]; k++) seen.push((i * 4 + j) * 5 + k);
      }
      expect(seen).toEqual(Array.from({ length: count }, (_, q) => start + q));
    }
  });
});

describe.skipIf(!NC)('NetCDF-4 read by hyperslabs', { timeout: 60_000 }, () => {
  it('has the header of the whole-file conversion, and each band the values of a whole read', async () => {
    const nc4 = join(t.dir, 'run4.nc');
    execFileSync(NCCOPY, ['-k', 'nc4', '-d', '4', classic, nc4]);
    const converted = await netcdf4ToClassic(nc4);
    const file = readNetcdfHeader(converted, nc4);
    const nc = await openNetcdf4Input(nc4);
    try {
      expect(nc.file).toEqual(file);
      for (const v of nc.file.variables) {
        if (v.type === 'char' || v.shape.length < 2) {
          expect(Array.from(nc.storedBits(v) as ArrayLike<number>)).toEqual(Array.from(classicInput(converted, nc4).storedBits(v) as ArrayLike<number>));
          continue;
        }
        const whole = readNetcdfVariable(converted, file, v.name, undefined, { mark: true });
        const r = nc.variable(v.name, { mark: true });
        const cols = r.shape[1];
        const got = r.rows(3, 9);
        expect(Array.from(got)).toEqual(Array.from(whole.values.subarray(3 * cols, 12 * cols)));
        expect(Array.from(r.values(5, 3 * cols))).toEqual(Array.from(whole.values.subarray(5, 5 + 3 * cols)));
      }
    } finally {
      nc.close();
    }
  });
});

describe('NetCDF-4 variables that cannot be read in bounded memory', { timeout: 120_000 }, () => {
  it('a variable in compressed chunks over 64 MiB is refused before any value is read, naming the remedy', async () => {
    const { h5 } = await import('../../src/io/hdf5-read.js');
    const lib = await h5();
    const path = join(t.dir, 'bigchunk.h5');
    const side = 4100; // one chunk of 4100 x 4100 float32: 67240000 bytes, over MAX_CHUNK_BYTES
    expect(side * side * 4).toBeGreaterThan(MAX_CHUNK_BYTES);
    const f = new lib.File(path, 'w');
    f.create_dataset({ name: 'big', data: new Float32Array(side * side), shape: [side, side], dtype: '<f', chunks: [side, side], compression: 1 } as never);
    f.create_dataset({ name: 'small', data: new Float32Array(64 * 64).fill(2), shape: [64, 64], dtype: '<f', chunks: [16, 16], compression: 1 } as never);
    f.close();
    expect(statSync(path).size).toBeLessThan(1 << 20);
    const nc = await openNetcdf4Input(path);
    try {
      expect(() => nc.variable('big')).toThrow(/variable '\/big' is stored in compressed chunks of 67240000 bytes \(4100 x 4100\), which HDF5 inflates whole for every read; .* rechunk it first/);
      expect(Array.from(nc.variable('small').rows(10, 1))).toEqual(new Array(64).fill(2));
    } finally {
      nc.close();
    }
    const r = await rfIn(['pack', path, '-o', 'bigchunk.rfz', '--bound', 'abs:0.1'], t.dir);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/^rankfield: error: .*bigchunk\.h5: variable '\/big' is stored in compressed chunks/);
  });
});

/** The archive the command line wrote for `file`, rebuilt from its variables read whole (the way pack read NetCDF before it read bands). */
async function fromWholeVariables(archivePath: string, ncBytes: Uint8Array, bound: string): Promise<Uint8Array> {
  const a = await open(new Uint8Array(readFileSync(archivePath)));
  const file = readNetcdfHeader(ncBytes, 'x');
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink, a.header.attrs, { slices: a.header.fields.some((h) => (h.slices ?? 1) > 1) });
  for (const h of a.header.fields) {
    const read = readNetcdfVariable(ncBytes, file, h.name, undefined, { mark: true });
    if (read.shape.length > 2) expect(h.layout).toBe(chooseLayout(read.values, read.shape, parseBound(bound), read.fill));
    b.add(read.values, h.shape, { bound, fill: read.fill, fillGuard: false, name: h.name, attrs: h.attrs, slices: h.slices ?? 1, ndShape: h.nd_shape, dims: h.dims, layout: h.layout });
  }
  b.finish();
  await a.close();
  return sink.bytes();
}

// Packs of a few hundred kB each, but with the layout trial of two 3-D variables: slow on a busy machine.
describe('pack reads NetCDF by bands into the same archive', { timeout: 240_000 }, () => {
  it('classic: the archive is byte for byte the one packed from the variables read whole', async () => {
    for (const bound of ['rel:1e-3']) {
      const out = join(t.dir, `run-${bound.replace(':', '')}.rfz`);
      const r = await rfIn(['pack', classic, '-o', out, '--bound', bound, '--threads', '1', '--quiet'], t.dir);
      expect(r.code, r.stderr).toBe(0);
      expect(Buffer.from(readFileSync(out)).equals(Buffer.from(await fromWholeVariables(out, bytes, bound)))).toBe(true);
    }
  });

  it.skipIf(!NC)('NetCDF-4: the same archive as from the file converted whole', async () => {
    const nc4 = join(t.dir, 'pack4.nc');
    execFileSync(NCCOPY, ['-k', 'nc4', '-d', '2', classic, nc4]);
    const out = join(t.dir, 'pack4.rfz');
    const r = await rfIn(['pack', nc4, '-o', out, '--bound', 'psnr:60', '--threads', '1', '--quiet'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    expect(Buffer.from(readFileSync(out)).equals(Buffer.from(await fromWholeVariables(out, await netcdf4ToClassic(nc4), 'psnr:60')))).toBe(true);
  });

  it('the first pass reads at most the band asked at a time, and the encoder packs the same bytes from small bands', async () => {
    const { nc, reads } = counted(classicInput(bytes, 'run.nc'));
    const { fields, archiveAttrs } = netcdfFields(nc, undefined, undefined, parseBound('abs:0.01'), 'slices', undefined, 100);
    const passReads = reads.slice();
    expect(Math.max(...passReads)).toBeLessThanOrEqual(100);
    const sink = new MemorySink();
    const b = new ArchiveBuilder(sink, archiveAttrs, { slices: true });
    for (const f of fields) b.addBands(fieldBands(f), [f.rows, f.cols], f.read.dtype, { bound: 'abs:0.01', fill: f.read.fill, fillGuard: false, name: f.name, attrs: f.attrs, slices: f.slices, ndShape: f.read.shape, dims: f.read.dims, layout: f.layout });
    b.finish();
    const ref = new MemorySink();
    const w = new ArchiveBuilder(ref, archiveAttrs, { slices: true });
    for (const f of fields) {
      const read = readNetcdfVariable(bytes, nc.file, f.name, undefined, { mark: true });
      expect(f.read.fillCount).toBe(read.fillCount);
      w.add(read.values, [f.rows, f.cols], { bound: 'abs:0.01', fill: read.fill, fillGuard: false, name: f.name, attrs: f.attrs, slices: f.slices, ndShape: read.shape, dims: read.dims, layout: f.layout });
    }
    w.finish();
    expect(Buffer.from(sink.bytes()).equals(Buffer.from(ref.bytes()))).toBe(true);
  });
});

describe('check, trial and preview read originals by bands', { timeout: CLI_TIMEOUT * 2 }, () => {
  it('check with band originals reads a band of tile rows at a time and reports as with whole arrays', async () => {
    const values = readNetcdfVariable(bytes, readNetcdfHeader(bytes), 'temp', undefined, { mark: true });
    const sink = new MemorySink();
    const b = new ArchiveBuilder(sink, {}, { slices: true });
    b.add(values.values, [Y, X], { bound: 'abs:0.05', tile: [16, 16], fill: values.fill, name: 'temp', slices: T, ndShape: values.shape });
    b.finish();
    const a = await open(sink.bytes());
    const asked: [number, number][] = [];
    const band: BandOriginal = {
      band: (r0, count) => {
        asked.push([r0, count]);
        return values.values.slice(r0 * X, (r0 + count) * X);
      },
    };
    const byBands = await a.check({ temp: band });
    const whole = await a.check({ temp: values.values });
    expect(byBands).toEqual(whole);
    expect(byBands.ok).toBe(true);
    expect(byBands.fields[0].measured!.maxErr).toBeGreaterThan(0);
    // One read per tile row of each slice (16, 16 and 8 rows), never the whole field.
    expect(asked).toEqual(Array.from({ length: T }, (_, s) => [[s * Y, 16], [s * Y + 16, 16], [s * Y + 32, 8]]).flat());
  });

  it('check --against a NetCDF and a .npy original compares band by band', async () => {
    const out = join(t.dir, 'chk.rfz');
    expect((await rfIn(['pack', classic, '-o', out, '--bound', 'abs:0.01', '--var', 'deep', '--quiet'], t.dir)).code).toBe(0);
    const r = await rfIn(['check', out, '--against', classic, '--json'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const rep = JSON.parse(r.stdout) as { ok: boolean; fields: { measured: { maxErr: number; specialMismatches: number } }[] };
    expect(rep.ok).toBe(true);
    expect(rep.fields[0].measured.maxErr).toBeGreaterThan(0);
    expect(rep.fields[0].measured.maxErr).toBeLessThanOrEqual(0.01);
    // A .npy original of the same values (3-D, C order), read by bands of tile rows.
    const deep = readNetcdfVariable(bytes, readNetcdfHeader(bytes), 'deep').values as Float64Array;
    const npy = join(t.dir, 'deep.npy');
    writeFileSync(npy, Buffer.concat([npyHeader([6, 20, 16], 'f64'), valueBytes(deep, 'little')]));
    const n = await rfIn(['check', out, '--against', npy, '--json'], t.dir);
    expect(n.code, n.stderr).toBe(0);
    expect((JSON.parse(n.stdout) as typeof rep).fields[0].measured).toEqual(rep.fields[0].measured);
  });

  it('trial reads a NetCDF variable a band at a time, then the sample rows alone', async () => {
    const { nc, reads } = counted(classicInput(bytes, 'run.nc'));
    const s = netcdfSample(nc, { var: 'temp', sample: 8 }, 200);
    expect(s.shape).toEqual([8, 8]);
    // The range pass reads whole rows, at most 200 values (6 rows of 30) at a time; the sample, 8 values a row.
    expect(Math.max(...reads)).toBeLessThanOrEqual(200);
    expect(reads.slice(-8)).toEqual(new Array(8).fill(8));
    const whole = readNetcdfVariable(bytes, nc.file, 'temp').values;
    const base = 2 * Y * X; // the middle slice
    for (let i = 0; i < 8; i++) expect(Array.from(s.values.subarray(i * 8, i * 8 + 8))).toEqual(Array.from(whole.subarray(base + (16 + i) * X + 11, base + (16 + i) * X + 19)));
  });

  it('preview error maps read the original a band of rows at a time, as from the whole plane', async () => {
    const values = readNetcdfVariable(bytes, readNetcdfHeader(bytes), 'temp').values.slice(0, Y * X);
    const sink = new MemorySink();
    const b = new ArchiveBuilder(sink);
    b.add(values, [Y, X], { bound: 'abs:0.05', tile: [8, 8], fill: -999, name: 'p' });
    b.finish();
    const a = await open(sink.bytes());
    const h = a.field('p').header;
    const plane = slicePlane(a, h, 0);
    const w = { slice: 0, rows: [0, Y] as [number, number], cols: [0, X] as [number, number] };
    const asked: number[] = [];
    const rows = (r0: number, count: number): FloatArray => {
      asked.push(count);
      return values.slice(r0 * X, (r0 + count) * X);
    };
    const byBands = await readGrids(plane, h, w, 2, rows, 0.05);
    const whole = await readGrids(plane, h, w, 2, values, 0.05);
    expect(byBands).toEqual(whole);
    expect(Math.max(...asked)).toBeLessThanOrEqual(8);
  });
});
