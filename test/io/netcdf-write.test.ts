import { describe, expect, it } from 'vitest';
import { NetCDFReader } from 'netcdfjs';
import { InputCode, InputError } from '../../src/errors.js';
import { planNetcdf, writeNetcdf, type NcWriteFile } from '../../src/io/netcdf-write.js';
import { readNetcdfHeader, readNetcdfVariable } from '../../src/io/netcdf-read.js';
import { classicRun, offset64Run } from '../fixtures/netcdf/make-fixtures.js';

// Sources. "SPEC" = the NetCDF classic format specification (the header
// grammar in the NetCDF User's Guide, "File Format Specifications"), from
// memory. "netcdfjs" = the netcdfjs 4.0.0 package, used here as the
// reference reader: what it reads back is compared with what was written.

/** Bytes from a hex string; spaces are ignored. */
function hex(s: string): Uint8Array {
  const t = s.replace(/\s+/g, '');
  return Uint8Array.from({ length: t.length / 2 }, (_, i) => parseInt(t.slice(2 * i, 2 * i + 2), 16));
}

/** netcdfjs's data as one flat list (it nests record variables per record). */
function flat(x: unknown): unknown[] {
  return Array.isArray(x) ? x.flatMap(flat) : [x];
}

function expectOptionError(fn: () => unknown, message: RegExp): void {
  let error: unknown;
  try {
    fn();
  } catch (e) {
    error = e;
  }
  expect(error).toBeInstanceOf(InputError);
  expect((error as InputError).code).toBe(InputCode.Option);
  expect((error as InputError).message).toMatch(message);
}

/** Same numbers, bit for bit (Object.is tells -0 from 0 and matches NaN). */
function expectSameNumbers(actual: ArrayLike<unknown>, expected: ArrayLike<number>): void {
  expect(actual.length).toBe(expected.length);
  for (let i = 0; i < expected.length; i++) {
    if (!Object.is(actual[i], expected[i])) throw new Error(`value ${i}: got ${String(actual[i])}, want ${expected[i]}`);
  }
}

describe('writeNetcdf: bytes per the format specification', () => {
  it('writes a one-variable file exactly as the header grammar lays it out', () => {
    const bytes = writeNetcdf({
      dims: [{ name: 'x', size: 2 }],
      globalAttrs: { title: 'ab' },
      variables: [{ name: 'v', dims: ['x'], type: 'double', attrs: {}, values: Float64Array.of(1.5, -2) }],
    });
    // SPEC: magic 'CDF' 01; numrecs; dim_list = NC_DIMENSION nelems [name dim_length];
    // gatt_list = NC_ATTRIBUTE nelems [name nc_type nelems values padding];
    // var_list = NC_VARIABLE nelems [name ndims dimids vatt_list nc_type vsize begin];
    // an empty list is ABSENT = ZERO ZERO; names are nelems + bytes padded to 4.
    // Doubles are IEEE 754 big-endian: 1.5 = 3FF8..., -2 = C000... (from memory).
    const expected = hex(`
      43444601 00000000
      0000000A 00000001 00000001 78000000 00000002
      0000000C 00000001 00000005 7469746C 65000000 00000002 00000002 61620000
      0000000B 00000001 00000001 76000000 00000001 00000000 00000000 00000000 00000006 00000010 00000068
      3FF8000000000000 C000000000000000`);
    expect(Buffer.from(bytes).toString('hex')).toBe(Buffer.from(expected).toString('hex'));
  });

  it('stores begin as a 64-bit integer in the 64-bit-offset format', () => {
    const spec: NcWriteFile = {
      format: '64bit-offset',
      dims: [{ name: 'x', size: 2 }],
      globalAttrs: {},
      variables: [{ name: 'v', dims: ['x'], type: 'float', attrs: {}, values: Float32Array.of(1, 2) }],
    };
    const bytes = writeNetcdf(spec);
    // SPEC: version byte 2; begin = INT64. Header: 8 + 20 (dims) + 8 (ABSENT gatt) + 44 + 4 = 84 bytes.
    expect(bytes[3]).toBe(2);
    const view = new DataView(bytes.buffer, bytes.byteOffset);
    expect(view.getBigUint64(76)).toBe(84n);
    expect(bytes.length).toBe(84 + 8);
    expect(view.getFloat32(84)).toBe(1);
    expect(new NetCDFReader(bytes).getDataVariable('v')).toEqual([1, 2]); // netcdfjs
  });

  it('pads byte and short data to 4 bytes with the fill value', () => {
    const bytes = writeNetcdf({
      dims: [{ name: 'y', size: 2 }, { name: 'x', size: 3 }],
      globalAttrs: {},
      variables: [
        { name: 'b', dims: ['y', 'x'], type: 'byte', attrs: { _FillValue: 9 }, values: [-1, 0, 1, 2, 3, 4] },
        { name: 's', dims: ['x'], type: 'short', attrs: {}, values: Int16Array.of(1, 2, 3) },
      ],
    });
    const file = readNetcdfHeader(bytes);
    const [b, s] = file.variables;
    // SPEC: "In data, padding uses the variable's fill value"; the default
    // fill of short is -32767 = 0x8001 (netcdf.h NC_FILL_SHORT, from memory).
    expect(Buffer.from(bytes.subarray(b.begin, b.begin + 8)).toString('hex')).toBe('ff00010203040909');
    expect(Buffer.from(bytes.subarray(s.begin, s.begin + 8)).toString('hex')).toBe('0001000200038001');
  });

  it('does not pad the records of a lone short record variable, but pads its vsize', () => {
    const values = Int16Array.from({ length: 9 }, (_, i) => 100 * i - 400); // 3 records of 3 shorts
    const bytes = writeNetcdf({
      dims: [{ name: 't', size: 3, unlimited: true }, { name: 'x', size: 3 }],
      globalAttrs: {},
      variables: [{ name: 'h', dims: ['t', 'x'], type: 'short', attrs: {}, values }],
    });
    const file = readNetcdfHeader(bytes);
    const h = file.variables[0];
    // SPEC: with exactly one record variable, of type byte, char or short,
    // records are not padded; so the record size is 3 * 2 = 6 bytes.
    expect(file.recordSize).toBe(6);
    expect(bytes.length).toBe(h.begin + 18);
    const view = new DataView(bytes.buffer, bytes.byteOffset);
    for (let i = 0; i < 9; i++) expect(view.getInt16(h.begin + 2 * i)).toBe(values[i]);
    // vsize (the header field before the 4-byte begin, which ends the
    // header here) is the padded slab size, 8, as the netCDF C library
    // writes it (from memory). netcdfjs 4.0.0 trusts vsize: it reads 4
    // values per record, 8 bytes apart, and runs off the end of this file
    // with a RangeError; one reason this project reads values itself.
    expect(view.getUint32(h.begin - 8)).toBe(8);
    expectSameNumbers(readNetcdfVariable(bytes, file, 'h').values, Array.from(values));
  });
});

describe('writeNetcdf read back with netcdfjs', () => {
  const specials32 = Float32Array.of(0, -0, 1.5, -3.25, Math.fround(1e-40), 3.4028234663852886e38, Infinity, -Infinity, NaN, Math.fround(Math.PI), 1e-7, 7);
  const specials64 = Float64Array.of(0, -0, 5e-324, Number.MAX_VALUE, -Infinity, NaN, Math.E, 1 / 3, -1e300, 2 ** 60, 42, -0.1);

  function sample(format: NcWriteFile['format']): NcWriteFile {
    return {
      format,
      dims: [{ name: 'time', size: 2, unlimited: true }, { name: 'y', size: 2 }, { name: 'x', size: 3 }],
      globalAttrs: { title: 'Corvane Basin test file', spacing: 0.25, levels: [1, 2, 4], empty: '' },
      globalAttrTypes: { levels: 'int' },
      variables: [
        { name: 'a', dims: ['time', 'y', 'x'], type: 'float', attrs: { units: 'K', _FillValue: -999, valid_range: [-10, 50] }, values: specials32 },
        { name: 'b', dims: ['time', 'y', 'x'], type: 'double', attrs: { scale: 2.5, n: 3 }, attrTypes: { n: 'short' }, values: specials64 },
        { name: 'c', dims: ['y', 'x'], type: 'double', attrs: { flag: 7 }, attrTypes: { flag: 'byte' }, values: specials64.subarray(0, 6) },
      ],
    };
  }

  it.each(['classic', '64bit-offset'] as const)('%s: same dimensions, attributes and values, bit for bit', (format) => {
    const spec = sample(format);
    const reader = new NetCDFReader(writeNetcdf(spec)); // netcdfjs
    expect(reader.version).toBe(format === 'classic' ? 'classic format' : '64-bit offset format');
    // netcdfjs reports the unlimited dimension with size 0 and the record count apart.
    expect(reader.dimensions).toEqual([{ name: 'time', size: 0 }, { name: 'y', size: 2 }, { name: 'x', size: 3 }]);
    expect(reader.recordDimension.length).toBe(2);
    expect(reader.recordDimension.name).toBe('time');
    expect(reader.globalAttributes).toEqual([
      { name: 'title', type: 'char', value: 'Corvane Basin test file' },
      { name: 'spacing', type: 'double', value: 0.25 },
      { name: 'levels', type: 'int', value: [1, 2, 4] },
      { name: 'empty', type: 'char', value: '' },
    ]);
    const vars = reader.variables;
    expect(vars.map((v) => [v.name, v.type, v.dimensions, v.record])).toEqual([
      ['a', 'float', [0, 1, 2], true],
      ['b', 'double', [0, 1, 2], true],
      ['c', 'double', [1, 2], false],
    ]);
    expect(vars[0].attributes).toEqual([
      { name: 'units', type: 'char', value: 'K' },
      { name: '_FillValue', type: 'float', value: -999 }, // the variable's type, as netCDF requires of _FillValue
      { name: 'valid_range', type: 'float', value: [-10, 50] },
    ]);
    expect(vars[1].attributes).toEqual([
      { name: 'scale', type: 'double', value: 2.5 },
      { name: 'n', type: 'short', value: 3 },
    ]);
    expect(vars[2].attributes).toEqual([{ name: 'flag', type: 'byte', value: [7] }]); // netcdfjs returns bytes as a list
    expectSameNumbers(flat(reader.getDataVariable('a')), Array.from(specials32));
    expectSameNumbers(flat(reader.getDataVariable('b')), Array.from(specials64));
    expectSameNumbers(flat(reader.getDataVariable('c')), Array.from(specials64.subarray(0, 6)));
  });

  it.each([
    ['classic', classicRun],
    ['64-bit-offset', offset64Run],
  ] as const)('the %s Corvane Basin run: every variable and attribute as written', (_label, make) => {
    const spec = make();
    const reader = new NetCDFReader(writeNetcdf(spec)); // netcdfjs
    expect(reader.dimensions.map((d) => d.name)).toEqual(spec.dims.map((d) => d.name));
    expect(reader.dimensions.map((d) => d.size)).toEqual(spec.dims.map((d) => (d.unlimited ? 0 : d.size)));
    for (const a of reader.globalAttributes) expect(a.value).toEqual(spec.globalAttrs[a.name]);
    for (const v of spec.variables) {
      const got = reader.variables.find((x) => x.name === v.name);
      expect(got?.type).toBe(v.type);
      for (const a of got?.attributes ?? []) {
        const attr = a as { name: string; type: string; value: unknown };
        const want = v.attrs[attr.name];
        // netcdfjs returns byte attributes as lists of unsigned bytes; these are 0 and 1 only.
        expect(attr.value).toEqual(attr.type === 'byte' && !Array.isArray(want) ? [want] : want);
      }
      const data = flat(reader.getDataVariable(v.name));
      if (v.type === 'char') {
        // netcdfjs returns one string per char value, '' for NUL.
        const rows = (v.values as string[]).map((s) => s.padEnd(12, '\0')).join('');
        expect(data.map((c) => (c === '' ? '\0' : c)).join('')).toBe(rows);
      } else if (v.type === 'byte') {
        // netcdfjs reads a fixed byte variable's padding too (it reads vsize bytes): 768 is a multiple of 4, so none here.
        expectSameNumbers(data, Array.from(v.values as Int8Array));
      } else {
        expectSameNumbers(data, Array.from(v.values as ArrayLike<number>));
      }
    }
  });
});

describe('planNetcdf: choosing the format', () => {
  // Layout only: no values are allocated. 2^14 x 2^14 floats = 1 GiB per variable.
  const big = (format?: NcWriteFile['format'], n = 2) => ({
    format,
    dims: [{ name: 'y', size: 16384 }, { name: 'x', size: 16384 }, { name: 'k', size: 4 }],
    globalAttrs: {},
    variables: [
      ...Array.from({ length: n }, (_, i) => ({ name: `v${i}`, dims: ['y', 'x'], type: 'float' as const, attrs: {} })),
      { name: 'small', dims: ['k'], type: 'float' as const, attrs: {} },
    ],
  });

  it('keeps the classic format while every begin fits in 32 signed bits', () => {
    const layout = planNetcdf(big(undefined, 1));
    expect(layout.format).toBe('classic');
    expect(layout.begins[1]).toBe(layout.headerBytes + 2 ** 30);
  });

  it('switches to 64-bit offsets when a begin passes 2^31 - 1', () => {
    // SPEC: begin is a 32-bit INT in CDF-1, a 64-bit INT64 in CDF-2.
    const layout = planNetcdf(big());
    expect(layout.format).toBe('64bit-offset');
    expect(layout.begins[2]).toBe(layout.headerBytes + 2 ** 31);
    expect(layout.totalBytes).toBe(layout.headerBytes + 2 ** 31 + 16);
  });

  it('refuses classic when asked for it and the offsets do not fit', () => {
    expectOptionError(() => planNetcdf(big('classic')), /too large for the classic format/);
  });

  it('refuses a variable over 2^32 - 4 bytes that is not the last', () => {
    const spec = big();
    spec.variables[0].type = 'double' as 'float';
    spec.dims[0].size = 32768; // v0 = 2^15 x 2^14 doubles = 4 GiB
    expectOptionError(() => planNetcdf(spec), /too large for the 64-bit-offset format/);
  });
});

describe('writeNetcdf: refusing what the format cannot hold', () => {
  const base = (): NcWriteFile => ({
    dims: [{ name: 'y', size: 2 }, { name: 'x', size: 2 }],
    globalAttrs: {},
    variables: [{ name: 'v', dims: ['y', 'x'], type: 'float', attrs: {}, values: new Float32Array(4) }],
  });
  const cases: [string, (f: NcWriteFile) => void, RegExp][] = [
    ['a name with a slash', (f) => (f.variables[0].name = 'a/b'), /not a valid NetCDF name/],
    ['a name with a trailing space', (f) => (f.dims[0].name = 'y '), /not a valid NetCDF name/],
    ['a name starting with punctuation', (f) => (f.globalAttrs['-x'] = 1), /not a valid NetCDF name/],
    ['two dimensions of one name', (f) => (f.dims[1].name = 'y'), /two dimensions named 'y'/],
    ['an undefined dimension', (f) => (f.variables[0].dims = ['y', 'z']), /dimension 'z', which is not defined/],
    ['a fixed dimension of size 0', (f) => (f.dims[0].size = 0), /size 0.*0 would mean unlimited/],
    ['two unlimited dimensions', (f) => f.dims.forEach((d) => (d.unlimited = true)), /only one dimension may be unlimited/],
    ['the unlimited dimension not first', (f) => (f.dims[1].unlimited = true), /may only be the first/],
    ['too few values', (f) => (f.variables[0].values = new Float32Array(3)), /needs 4 values, got 3/],
    ['float64 values for a float variable', (f) => (f.variables[0].values = new Float64Array(4)), /is float: pass a Float32Array/],
    ['a short out of range', (f) => Object.assign(f.variables[0], { type: 'short', values: [1, 2, 3, 40000] }), /40000 does not fit the NetCDF type short/],
    ['a text attribute typed as int', (f) => Object.assign(f.variables[0], { attrs: { units: 'm' }, attrTypes: { units: 'int' } }), /is text but its type is given as int/],
    ['a fractional byte attribute', (f) => Object.assign(f.variables[0], { attrs: { k: 1.5 }, attrTypes: { k: 'byte' } }), /1.5 does not fit the NetCDF type byte/],
    ['an unknown format', (f) => (f.format = 'cdf5' as 'classic'), /format must be 'classic' or '64bit-offset'/],
  ];
  it.each(cases)('%s', (_label, change, message) => {
    const f = base();
    change(f);
    expectOptionError(() => writeNetcdf(f), message);
  });
});
