import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { NetCDFReader } from 'netcdfjs';
import { InputCode, InputError } from '../../src/errors.js';
import { PACKED_FALLBACK_FILL, physicalAttributes, readNetcdfHeader, readNetcdfVariable } from '../../src/io/netcdf-read.js';
import { writeNetcdf, type NcWriteFile } from '../../src/io/netcdf-write.js';
import { NX, NY, NZ, SALT_FILL, SSH_FILL, SSH_OFFSET, SSH_SCALE, SST64_MISSING, SST_FILL, classicRun, isOcean } from '../fixtures/netcdf/make-fixtures.js';

// Sources. "netcdfjs" = the netcdfjs 4.0.0 package, the reference reader
// whose raw (stored) values the physical values here are checked against.
// "CF 8.1" = CF Conventions 1.8, section 8.1 "Packed Data":
// unpacked = packed * scale_factor + add_offset. "CF 2.5.1" = section 2.5.1
// "Missing data": cells equal to _FillValue or missing_value are missing,
// compared before unpacking. Both from memory. "SPEC" = the NetCDF classic
// format specification, from memory.

const dir = path.join(path.dirname(fileURLToPath(import.meta.url)), '../fixtures/netcdf');
const load = (name: string): Uint8Array => new Uint8Array(fs.readFileSync(path.join(dir, name)));
const classic = load('corvane-run-classic.nc');
const run64 = load('corvane-run-64bit.nc');

/** netcdfjs's data as one flat list of numbers (it nests record variables per record). */
function raw(bytes: Uint8Array, name: string): number[] {
  const flat = (x: unknown): unknown[] => (Array.isArray(x) ? x.flatMap(flat) : [x]);
  return flat(new NetCDFReader(bytes).getDataVariable(name)) as number[];
}

const oceanCells = (() => {
  let n = 0;
  for (let j = 0; j < NY; j++) for (let i = 0; i < NX; i++) if (isOcean(j, i)) n++;
  return n;
})();

function expectInputError(fn: () => unknown, code: InputCode, message: RegExp): void {
  let error: unknown;
  try {
    fn();
  } catch (e) {
    error = e;
  }
  expect(error).toBeInstanceOf(InputError);
  expect((error as InputError).code).toBe(code);
  expect((error as InputError).message).toMatch(message);
}

describe('readNetcdfHeader on the fixtures', () => {
  it('agrees with netcdfjs on dimensions, variables and types (classic, record time)', () => {
    const file = readNetcdfHeader(classic, 'corvane-run-classic.nc');
    const ref = new NetCDFReader(classic); // netcdfjs
    expect(file.format).toBe('classic');
    expect(file.numRecords).toBe(ref.recordDimension.length);
    expect(file.dims.map((d) => d.name)).toEqual(ref.dimensions.map((d) => d.name));
    expect(file.dims.map((d) => (d.unlimited ? 0 : d.size))).toEqual(ref.dimensions.map((d) => d.size));
    expect(file.dims[0]).toEqual({ name: 'time', size: 6, unlimited: true });
    for (const [k, v] of file.variables.entries()) {
      const r = ref.variables[k];
      expect([v.name, v.type, v.isRecord, v.begin]).toEqual([r.name, r.type, r.record, r.offset]);
      expect(v.dims).toEqual(r.dimensions.map((id) => ref.dimensions[id].name));
    }
    const salt = file.variables.find((v) => v.name === 'salt');
    expect(salt?.shape).toEqual([6, NZ, NY, NX]);
    expect(salt?.dims).toEqual(['time', 'depth', 'lat', 'lon']);
  });

  it('gives the attributes as written, with their types (64-bit offset)', () => {
    const file = readNetcdfHeader(run64);
    expect(file.format).toBe('64bit-offset');
    expect(file.numRecords).toBe(0);
    expect(file.globalAttrs.Conventions).toBe('CF-1.8');
    expect(file.globalAttrs.run_number).toBe(7);
    expect(file.globalAttrTypes.run_number).toBe('int');
    const mask = file.variables.find((v) => v.name === 'mask');
    expect(mask?.attrs).toEqual({ long_name: 'land-sea mask', flag_values: [0, 1], flag_meanings: 'land ocean' });
    expect(mask?.attrTypes.flag_values).toBe('byte');
    const ssh = file.variables.find((v) => v.name === 'ssh');
    expect(ssh?.attrs.scale_factor).toBe(SSH_SCALE);
    expect(ssh?.attrTypes).toMatchObject({ scale_factor: 'float', add_offset: 'float', _FillValue: 'short' });
  });

  it('reads signed bytes and UTF-8 text, which netcdfjs garbles', () => {
    const bytes = writeNetcdf({
      dims: [{ name: 'y', size: 2 }, { name: 'x', size: 2 }],
      globalAttrs: { place: 'Baie de Corvane, côte est' },
      variables: [{ name: 'b', dims: ['y', 'x'], type: 'byte', attrs: { offsets: [-3, 100], 'unité': '°C' }, attrTypes: { offsets: 'byte' }, values: [-128, -1, 0, 127] }],
    });
    const file = readNetcdfHeader(bytes);
    expect(file.globalAttrs.place).toBe('Baie de Corvane, côte est');
    expect(file.variables[0].attrs).toEqual({ offsets: [-3, 100], 'unité': '°C' });
    // SPEC: NC_BYTE is a signed 8-bit integer.
    expect(Array.from(readNetcdfVariable(bytes, file, 'b').values)).toEqual([-128, -1, 0, 127]);
    // netcdfjs 4.0.0 reads the same bytes as unsigned: documented here so a fixed netcdfjs shows up.
    expect((new NetCDFReader(bytes).variables[0].attributes as unknown[])[0]).toMatchObject({ value: [253, 100] });
  });

  it('keeps an attribute named __proto__ as an ordinary attribute', () => {
    const attrs = JSON.parse('{"__proto__": "odd but legal", "units": "m"}') as Record<string, string>;
    const bytes = writeNetcdf({ dims: [{ name: 'x', size: 1 }], globalAttrs: attrs, variables: [] });
    const file = readNetcdfHeader(bytes);
    expect(Object.keys(file.globalAttrs)).toEqual(['__proto__', 'units']);
    expect(Object.getPrototypeOf(file.globalAttrs)).toBe(Object.prototype);
  });

  it('counts the records from the file length when numrecs is STREAMING', () => {
    // SPEC: numrecs = 0xFFFFFFFF (STREAMING) means "count the records".
    const bytes = classic.slice();
    new DataView(bytes.buffer).setUint32(4, 0xffffffff);
    const file = readNetcdfHeader(bytes);
    expect(file.numRecords).toBe(6);
    expect(file.variables.find((v) => v.name === 'sst')?.shape).toEqual([6, NY, NX]);
  });

  it('reads from a Buffer that is a view into a larger allocation', () => {
    const pool = Buffer.alloc(run64.length + 13, 0xee);
    pool.set(run64, 7);
    const view = pool.subarray(7, 7 + run64.length);
    const file = readNetcdfHeader(view);
    const a = readNetcdfVariable(view, file, 'sst').values;
    const b = readNetcdfVariable(run64, readNetcdfHeader(run64), 'sst').values;
    expect(Buffer.compare(Buffer.from(a.buffer), Buffer.from(b.buffer))).toBe(0);
  });
});

describe('readNetcdfVariable: physical values per CF', () => {
  const file = readNetcdfHeader(classic);

  it('a float variable with _FillValue: stored values bit for bit, fill cells reported', () => {
    const r = readNetcdfVariable(classic, file, 'sst');
    const ref = raw(classic, 'sst'); // netcdfjs, a record variable
    expect(r.dtype).toBe('f32');
    expect(r.shape).toEqual([6, NY, NX]);
    expect(r.dims).toEqual(['time', 'lat', 'lon']);
    expect(r.unpacked).toBe(false);
    expect(Buffer.compare(Buffer.from(r.values.buffer), Buffer.from(Float32Array.from(ref).buffer))).toBe(0);
    // CF 2.5.1: _FillValue marks missing cells; here every land cell of every record.
    expect(r.fill).toBe(SST_FILL);
    expect(r.fillSource).toBe('_FillValue');
    expect(r.fillCount).toBe(ref.filter((x) => x === SST_FILL).length);
    expect(r.fillCount).toBe(6 * (NY * NX - oceanCells));
  });

  it('a 4-D float variable: the stored values, interleaved records untangled', () => {
    const r = readNetcdfVariable(classic, file, 'salt');
    const ref = raw(classic, 'salt'); // netcdfjs
    expect(r.shape).toEqual([6, NZ, NY, NX]);
    expect(Array.from(r.values)).toEqual(ref);
    expect(r.fill).toBe(SALT_FILL);
    expect(r.fillCount).toBe(6 * NZ * (NY * NX - oceanCells));
    // valid_range is carried, not applied (see readNetcdfVariable).
    expect(r.attrs.valid_range).toEqual([0, 45]);
  });

  it('a packed short: packed * scale_factor + add_offset; fill = the unpacked _FillValue', () => {
    const r = readNetcdfVariable(classic, file, 'ssh');
    const packed = raw(classic, 'ssh'); // netcdfjs: the stored shorts
    expect(r.unpacked).toBe(true);
    expect(r.dtype).toBe('f64');
    expect(r.storedType).toBe('short');
    expect(r.packing).toEqual({ scale: SSH_SCALE, offset: SSH_OFFSET });
    const fill = SSH_FILL * SSH_SCALE + SSH_OFFSET; // CF 8.1 applied to _FillValue
    expect(r.fill).toBe(fill);
    let missing = 0;
    for (let k = 0; k < packed.length; k++) {
      if (packed[k] === SSH_FILL) {
        // CF 2.5.1: compared in the stored type, before unpacking.
        missing++;
        expect(r.values[k]).toBe(fill);
      } else {
        expect(r.values[k]).toBe(packed[k] * SSH_SCALE + SSH_OFFSET); // CF 8.1
      }
    }
    expect(missing).toBe(6 * (NY * NX - oceanCells));
    expect(r.fillCount).toBe(missing);
    // Physical values of a sea surface height: tens of centimetres.
    const ocean = Array.from(r.values).filter((x) => x !== fill);
    expect(Math.max(...ocean.map(Math.abs))).toBeLessThan(1);
  });

  it('a double with missing_value only (64-bit offset)', () => {
    const f64 = readNetcdfHeader(run64);
    const r = readNetcdfVariable(run64, f64, 'sst');
    expect(r.dtype).toBe('f64');
    expect(Array.from(r.values)).toEqual(raw(run64, 'sst')); // netcdfjs
    expect(r.fill).toBe(SST64_MISSING);
    expect(r.fillSource).toBe('missing_value');
    expect(r.fillCount).toBe(4 * (NY * NX - oceanCells));
  });

  it('an int without _FillValue: the netCDF default fill marks the unwritten cells', () => {
    const f64 = readNetcdfHeader(run64);
    const r = readNetcdfVariable(run64, f64, 'wet_steps');
    expect(r.dtype).toBe('f64');
    expect(Array.from(r.values)).toEqual(raw(run64, 'wet_steps')); // netcdfjs
    // NC_FILL_INT = -2147483647 (netcdf.h, from memory).
    expect(r.fill).toBe(-2147483647);
    expect(r.fillSource).toBe('default');
    expect(r.fillCount).toBe(NY * NX - oceanCells);
  });

  it('a byte mask: exact in float32, no fill (the default byte fill is not applied)', () => {
    const r = readNetcdfVariable(classic, file, 'mask');
    expect(r.dtype).toBe('f32');
    expect(r.fill).toBeNull();
    expect(Array.from(r.values).reduce((a, b) => a + b, 0)).toBe(oceanCells);
  });

  it('reads a hyperslab: the same values as the slice of the whole variable', () => {
    const whole = readNetcdfVariable(classic, file, 'salt').values;
    const part = readNetcdfVariable(classic, file, 'salt', { start: [2, 1, 5, 3], count: [3, 2, 4, 7] });
    expect(part.shape).toEqual([3, 2, 4, 7]);
    let k = 0;
    for (let t = 2; t < 5; t++) {
      for (let z = 1; z < 3; z++) {
        for (let j = 5; j < 9; j++) for (let i = 3; i < 10; i++) expect(part.values[k++]).toBe(whole[((t * NZ + z) * NY + j) * NX + i]);
      }
    }
    const one = readNetcdfVariable(run64, readNetcdfHeader(run64), 'ssh', { start: [3, 0, 0], count: [1, NY, NX] });
    expect(Array.from(one.values)).toEqual(Array.from(readNetcdfVariable(run64, readNetcdfHeader(run64), 'ssh').values.subarray(3 * NY * NX)));
    expectInputError(() => readNetcdfVariable(classic, file, 'sst', { start: [5, 0, 0], count: [2, NY, NX] }), InputCode.Shape, /do not select within dimension 'time' of size 6/);
  });
});

describe('readNetcdfVariable: missing values and packing edge cases', () => {
  const one = (type: NcWriteFile['variables'][number]['type'], attrs: NcWriteFile['variables'][number]['attrs'], values: NcWriteFile['variables'][number]['values'], attrTypes?: Record<string, 'float' | 'double' | 'short' | 'byte' | 'int'>) => {
    const bytes = writeNetcdf({
      dims: [{ name: 'y', size: 2 }, { name: 'x', size: 3 }],
      globalAttrs: {},
      variables: [{ name: 'v', dims: ['y', 'x'], type, attrs, attrTypes, values }],
    });
    return readNetcdfVariable(bytes, readNetcdfHeader(bytes), 'v');
  };

  it('rewrites a second missing value to _FillValue and counts it', () => {
    // CF 2.5.1: missing_value may hold several values, all of them missing.
    const r = one('float', { _FillValue: -999, missing_value: [-888, -777] }, Float32Array.of(1, -888, -999, 2, -777, 3));
    expect(Array.from(r.values)).toEqual([1, -999, -999, 2, -999, 3]);
    expect([r.fill, r.fillCount, r.remapped]).toEqual([-999, 3, 2]);
  });

  it('compares a double _FillValue with float cells in the stored type', () => {
    // CF 2.5.1 wants _FillValue in the variable's type; a double one is rounded to float first.
    const r = one('float', { _FillValue: 0.1 }, Float32Array.of(Math.fround(0.1), 1, 2, 3, 4, 5), { _FillValue: 'double' });
    expect(r.fill).toBe(Math.fround(0.1));
    expect(r.fillCount).toBe(1);
  });

  it('gives no fill for a NaN _FillValue: NaN cells stay NaN', () => {
    const r = one('double', { _FillValue: NaN }, Float64Array.of(NaN, 1, 2, 3, 4, 5));
    expect(r.fill).toBeNull();
    expect(Number.isNaN(r.values[0])).toBe(true);
  });

  it('does not apply valid_range', () => {
    const r = one('float', { valid_range: [0, 10] }, Float32Array.of(-5, 1, 2, 3, 4, 50));
    expect(Array.from(r.values)).toEqual([-5, 1, 2, 3, 4, 50]);
  });

  it('reads _Unsigned = "true" bytes as 0..255 (NetCDF User\'s Guide convention, from memory)', () => {
    const r = one('byte', { _Unsigned: 'true' }, [-56, -1, 0, 1, 2, 3]);
    expect(Array.from(r.values)).toEqual([200, 255, 0, 1, 2, 3]);
  });

  it('applies add_offset alone (scale_factor defaults to 1, CF 8.1)', () => {
    const r = one('short', { add_offset: 273.15 }, [0, 1, 2, 3, 4, 5]);
    expect(Array.from(r.values)).toEqual([0, 1, 2, 3, 4, 5].map((p) => p * 1 + 273.15));
    expect(r.unpacked).toBe(true);
  });

  it('falls back to -9.99e33 when the unpacked _FillValue cannot be told apart from a valid value', () => {
    // With add_offset 1e8 and scale_factor 1e-9, neighbouring shorts unpack to the same float64.
    const r = one('short', { scale_factor: 1e-9, add_offset: 1e8, _FillValue: -32767 }, [-32767, -32766, 0, 1, 2, 3]);
    expect(r.fill).toBe(PACKED_FALLBACK_FILL);
    expect(r.values[0]).toBe(PACKED_FALLBACK_FILL);
    expect(r.values[1]).toBe(-32766 * 1e-9 + 1e8);
  });

  it('physicalAttributes describe the unpacked values; a double variable written with them reads back the same', () => {
    const file = readNetcdfHeader(classic);
    const ssh = file.variables.find((v) => v.name === 'ssh');
    if (!ssh) throw new Error('fixture lacks ssh');
    const r = readNetcdfVariable(classic, file, 'ssh');
    const { attrs, attrTypes } = physicalAttributes(ssh, r);
    expect(attrs).toEqual({ long_name: 'sea surface height above geoid', standard_name: 'sea_surface_height_above_geoid', units: 'm', _FillValue: r.fill });
    expect(attrTypes._FillValue).toBe('double');
    const spec = classicRun();
    const back = writeNetcdf({
      dims: spec.dims,
      globalAttrs: {},
      variables: [{ name: 'ssh', dims: r.dims, type: 'double', attrs, attrTypes, values: r.values as Float64Array }],
    });
    const again = readNetcdfVariable(back, readNetcdfHeader(back), 'ssh');
    expect(Array.from(again.values)).toEqual(Array.from(r.values));
    expect([again.fill, again.fillCount, again.unpacked]).toEqual([r.fill, r.fillCount, false]);
  });
});

describe('bad input: one clear InputError each', () => {
  const file = readNetcdfHeader(classic);

  it('a file that is not NetCDF', () => {
    expectInputError(() => readNetcdfHeader(load('not-netcdf.nc'), 'not-netcdf.nc'), InputCode.File, /^not-netcdf\.nc: not a NetCDF file/);
    expectInputError(() => readNetcdfHeader(new Uint8Array(0), 'empty.nc'), InputCode.File, /empty\.nc: the file is empty/);
  });

  it('a NetCDF-4 (HDF5) file', () => {
    expectInputError(() => readNetcdfHeader(load('hdf5-signature.nc'), 'run4.nc'), InputCode.File, /run4\.nc: this is a NetCDF-4 \(HDF5\) file; only the NetCDF classic and 64-bit-offset formats are read/);
    const userBlock = new Uint8Array(600); // HDF5 allows a user block of 512 bytes before the signature
    userBlock.set(load('hdf5-signature.nc').subarray(0, 8), 512);
    expectInputError(() => readNetcdfHeader(userBlock), InputCode.File, /NetCDF-4 \(HDF5\)/);
  });

  it('a CDF-5 file or an unknown version byte', () => {
    expectInputError(() => readNetcdfHeader(Uint8Array.of(0x43, 0x44, 0x46, 5, 0, 0, 0, 0)), InputCode.File, /CDF-5 \(64-bit data\).*only the classic \(CDF-1\) and 64-bit-offset \(CDF-2\)/);
    expectInputError(() => readNetcdfHeader(Uint8Array.of(0x43, 0x44, 0x46, 9)), InputCode.File, /unknown NetCDF format version byte 9/);
  });

  it('a file truncated in the data', () => {
    expectInputError(() => readNetcdfHeader(load('truncated.nc'), 'truncated.nc'), InputCode.File, /^truncated\.nc: the file is 8192 bytes long but variable '.*' needs bytes up to \d+: a truncated NetCDF file/);
  });

  it('a file truncated in the header', () => {
    expectInputError(() => readNetcdfHeader(classic.subarray(0, 300), 'cut.nc'), InputCode.File, /^cut\.nc: the NetCDF header ends early/);
    expectInputError(() => readNetcdfHeader(classic.subarray(0, 2), 'cut.nc'), InputCode.File, /not a NetCDF file|truncated/);
  });

  it('every shorter prefix of a file is refused with an InputError', () => {
    const small = writeNetcdf({
      dims: [{ name: 't', size: 2, unlimited: true }, { name: 'x', size: 3 }],
      globalAttrs: { title: 'Corvane' },
      variables: [
        { name: 'a', dims: ['t', 'x'], type: 'float', attrs: { units: 'K' }, values: new Float32Array(6) },
        { name: 'b', dims: ['x', 'x'], type: 'byte', attrs: { k: [1, 2] }, attrTypes: { k: 'byte' }, values: new Int8Array(9) },
      ],
    });
    for (let n = 0; n < small.length; n++) {
      expect(() => readNetcdfHeader(small.subarray(0, n)), `prefix of ${n} bytes`).toThrow(InputError);
    }
    expect(readNetcdfHeader(small).variables).toHaveLength(2);
  });

  it('a corrupted header byte gives an InputError or a file whose variables read (no other failure)', () => {
    const small = writeNetcdf({
      dims: [{ name: 't', size: 2, unlimited: true }, { name: 'x', size: 3 }],
      globalAttrs: { title: 'Corvane' },
      variables: [{ name: 'a', dims: ['t', 'x'], type: 'short', attrs: { scale_factor: 0.5, _FillValue: -1 }, values: new Int16Array(6) }],
    });
    const headerEnd = readNetcdfHeader(small).variables[0].begin;
    for (let k = 0; k < headerEnd; k++) {
      for (const x of [0x01, 0xff]) {
        const bad = small.slice();
        bad[k] ^= x;
        try {
          const f = readNetcdfHeader(bad);
          for (const v of f.variables) if (v.type !== 'char' && v.shape.length >= 2 && !v.shape.includes(0)) readNetcdfVariable(bad, f, v.name);
        } catch (e) {
          if (!(e instanceof InputError)) throw new Error(`byte ${k} ^ ${x}: ${String(e)}`);
        }
      }
    }
    // Slow for a reason: every header byte is flipped two ways (about 340 parses), and a
    // flip that turns a count into millions makes netcdfjs build that many elements before
    // the bounds check fails (up to 1 s for one flip); 4.5 s alone on an idle 2-core machine.
  }, 60_000);

  it('a variable name that does not exist', () => {
    expectInputError(() => readNetcdfVariable(classic, file, 'temp'), InputCode.Missing, /no variable named 'temp' in the NetCDF file \(it has: time, depth, lat, lon, sst, salt, ssh, mask, station_name, station_lat\)/);
  });

  it('a 1-D variable', () => {
    expectInputError(() => readNetcdfVariable(classic, file, 'lat'), InputCode.Shape, /variable 'lat' has 1 dimension \(lat\); only variables of 2 or more dimensions/);
  });

  it('a char (string) variable', () => {
    expectInputError(() => readNetcdfVariable(classic, file, 'station_name'), InputCode.Dtype, /variable 'station_name' holds text \(char\)/);
  });

  it('a variable with no values (an unlimited dimension of no records)', () => {
    const bytes = writeNetcdf({
      dims: [{ name: 't', size: 0, unlimited: true }, { name: 'x', size: 3 }, { name: 'y', size: 2 }],
      globalAttrs: {},
      variables: [{ name: 'a', dims: ['t', 'x', 'y'], type: 'float', attrs: {}, values: new Float32Array(0) }],
    });
    expectInputError(() => readNetcdfVariable(bytes, readNetcdfHeader(bytes), 'a'), InputCode.Shape, /holds no values: dimension 't' has size 0/);
  });
});
