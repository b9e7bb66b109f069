import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { InputCode, InputError } from '../../src/errors.js';
import { formatNpy, parseNpy, parseNpyHeader } from '../../src/io/npy.js';
import { HOST_LITTLE_ENDIAN } from '../../src/io/ndarray.js';

// Sources for the format facts below. "DOC" = the numpy.lib.format module
// docstring, NumPy 2.4.6, as installed in this environment (read there, not
// recalled). "IMPL" = numpy/lib/_format_impl.py of the same install.
// IEEE 754 bit patterns are from memory, checked with Python's struct module.

/** Bytes from a hex string; spaces are ignored. */
function hex(s: string): Uint8Array {
  const t = s.replace(/\s+/g, '');
  return Uint8Array.from({ length: t.length / 2 }, (_, i) => parseInt(t.slice(2 * i, 2 * i + 2), 16));
}
const ascii = (s: string): number[] => Array.from(s, (c) => c.charCodeAt(0));

/**
 * A .npy file built byte by byte. DOC: magic "\x93NUMPY", major byte, minor
 * byte, HEADER_LEN as little-endian u2 (1.0) or u4 (2.0, 3.0), the header
 * dict text padded with spaces (0x20) and terminated by '\n' so that
 * magic + version + length + header is divisible by 64 (older writers used
 * 16; `align` varies it), then the data.
 */
function npy(header: string, data: Uint8Array | number[] = [], opts: { major?: number; align?: number } = {}): Uint8Array {
  const { major = 1, align = 64 } = opts;
  const text = Array.from(new TextEncoder().encode(header)); // UTF-8; plain ASCII in all but one test
  const prefix = major === 1 ? 10 : 12;
  const headerLen = Math.ceil((prefix + text.length + 1) / align) * align - prefix;
  const len = major === 1 ? [headerLen & 0xff, headerLen >> 8] : [headerLen & 0xff, (headerLen >> 8) & 0xff, headerLen >> 16, 0];
  const pad = new Array<number>(headerLen - text.length - 1).fill(0x20);
  return Uint8Array.from([0x93, ...ascii('NUMPY'), major, 0, ...len, ...text, ...pad, 0x0a, ...data]);
}
const dict = (descr: string, shape: string, fortran = 'False'): string =>
  `{'descr': '${descr}', 'fortran_order': ${fortran}, 'shape': ${shape}, }`;

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

describe('parseNpy: valid files', () => {
  it("reads a version 1.0 '<f4' 1-D array", () => {
    // IEEE 754 binary32 little-endian: 1.0 = 00 00 80 3f, 2.0 = 00 00 00 40, -1.5 = 00 00 c0 bf
    const a = parseNpy(npy(dict('<f4', '(3,)'), hex('0000803f 00000040 0000c0bf')));
    expect(a.dtype).toBe('f32');
    expect(a.shape).toEqual([3]);
    expect(a.data).toBeInstanceOf(Float32Array);
    expect(Array.from(a.data)).toEqual([1, 2, -1.5]);
  });

  it("reads a version 1.0 '>f4' 2-D array, converting from big-endian", () => {
    // binary32 big-endian: 1.0 = 3f800000, 2.0 = 40000000, -1.5 = bfc00000, 0.5 = 3f000000
    const a = parseNpy(npy(dict('>f4', '(2, 2)'), hex('3f800000 40000000 bfc00000 3f000000')));
    expect(a.shape).toEqual([2, 2]);
    expect(Array.from(a.data)).toEqual([1, 2, -1.5, 0.5]);
  });

  it("reads a version 2.0 '<f8' 3-D array (u4 header length)", () => {
    // DOC, "Format Version 2.0": HEADER_LEN becomes a little-endian unsigned int.
    // binary64 little-endian: 1.0 = ..f03f, 2.0 = ..0040, 0.5 = ..e03f, -2.0 = ..00c0
    const data = hex('000000000000f03f 0000000000000040 000000000000e03f 00000000000000c0');
    const bytes = npy(dict('<f8', '(2, 1, 2)'), data, { major: 2 });
    expect(Array.from(bytes.subarray(6, 12))).toEqual([2, 0, 116, 0, 0, 0]); // the builder's own layout
    const a = parseNpy(bytes);
    expect(a.dtype).toBe('f64');
    expect(a.data).toBeInstanceOf(Float64Array);
    expect(a.shape).toEqual([2, 1, 2]);
    expect(Array.from(a.data)).toEqual([1, 2, 0.5, -2]);
  });

  it("reads a version 3.0 '>f8' 0-d array as one value with shape []", () => {
    // DOC: shape=() means there is 1 element. binary64 big-endian 1.0 = 3ff0000000000000
    const a = parseNpy(npy(dict('>f8', '()'), hex('3ff0000000000000'), { major: 3 }));
    expect(a.shape).toEqual([]);
    expect(Array.from(a.data)).toEqual([1]);
  });

  it('accepts any alignment, keys in any order and without trailing comma, and Python 2 long suffixes', () => {
    // DOC: a reader MUST NOT depend on the keys being sorted; old files used 16-byte alignment.
    const text = `{"shape": (2,), 'fortran_order': False, 'descr': '<f4'}`;
    for (const align of [1, 16, 64, 4096]) {
      expect(Array.from(parseNpy(npy(text, hex('0000803f 00000040'), { align })).data)).toEqual([1, 2]);
    }
    // IMPL, _filter_header: Python 2 writers could emit "(2L, 1L)" in 1.0/2.0 files.
    expect(parseNpy(npy(dict('<f4', '(2L, 1L)'), hex('0000803f 00000040'))).shape).toEqual([2, 1]);
    expectInputError(() => parseNpy(npy(dict('<f4', '(2L,)'), hex('0000803f 00000040'), { major: 3 })), InputCode.File, /malformed header/);
  });

  it("treats '=' as this machine's byte order", () => {
    const h = parseNpyHeader(npy(dict('=f8', '(1,)'), new Array(8).fill(0)));
    expect(h.littleEndian).toBe(HOST_LITTLE_ENDIAN);
    expect(h.dtype).toBe('f64');
  });

  it('reorders fortran_order True data into C order (2-D, 3-D, big-endian)', () => {
    // DOC: the data is the contiguous Fortran- or C-ordered bytes of the array.
    // C array [[1, 2, 3], [4, 5, 6]] stored column by column is 1 4 2 5 3 6.
    // binary64 little-endian: 1 = ..f03f, 2 = ..0040, 3 = ..0840, 4 = ..1040, 5 = ..1440, 6 = ..1840
    const stored = hex('000000000000f03f 0000000000001040 0000000000000040 0000000000001440 0000000000000840 0000000000001840');
    const a = parseNpy(npy(dict('<f8', '(2, 3)', 'True'), stored));
    expect(a.shape).toEqual([2, 3]);
    expect(Array.from(a.data)).toEqual([1, 2, 3, 4, 5, 6]);

    // 3-D: element (i, j, k) = 100i + 10j + k sits at Fortran offset i + 2j + 6k.
    const buf = new DataView(new ArrayBuffer(24 * 4));
    for (let i = 0; i < 2; i++) for (let j = 0; j < 3; j++) for (let k = 0; k < 4; k++) buf.setFloat32((i + 2 * j + 6 * k) * 4, 100 * i + 10 * j + k, false);
    const b = parseNpy(npy(dict('>f4', '(2, 3, 4)', 'True'), new Uint8Array(buf.buffer)));
    const want: number[] = [];
    for (let i = 0; i < 2; i++) for (let j = 0; j < 3; j++) for (let k = 0; k < 4; k++) want.push(100 * i + 10 * j + k);
    expect(Array.from(b.data)).toEqual(want);
  });

  it('keeps NaN payloads bit for bit, also through the Fortran reordering', () => {
    // binary32 signalling NaN 7fa00001 (little-endian 01 00 a0 7f) next to 1.0 and 2.0.
    const a = parseNpy(npy(dict('<f4', '(1, 3)', 'True'), hex('0100a07f 0000803f 00000040')));
    expect(Array.from(new Uint8Array(a.data.buffer, a.data.byteOffset, 4))).toEqual([0x01, 0x00, 0xa0, 0x7f]);
  });

  it('reads a file written by NumPy itself, with its spare header space', () => {
    // Written by numpy 2.4.6 in this environment: np.lib.format.write_array of
    // np.asfortranarray(np.arange(12, dtype='>f4').reshape(3, 4)).
    const b64 =
      'k05VTVBZAQB2AHsnZGVzY3InOiAnPmY0JywgJ2ZvcnRyYW5fb3JkZXInOiBUcnVlLCAnc2hhcGUnOiAoMywgNCksIH0gICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgICAgIAoAAAAAQIAAAEEAAAA/gAAAQKAAAEEQAABAAAAAQMAAAEEgAABAQAAAQOAAAEEwAAA=';
    const a = parseNpy(Uint8Array.from(Buffer.from(b64, 'base64')));
    expect(a.shape).toEqual([3, 4]);
    expect(Array.from(a.data)).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11]);
  });

  it('reads from a view that does not start at the beginning of its buffer (e.g. a Node Buffer)', () => {
    const file = npy(dict('<f8', '(1,)'), hex('000000000000f03f'));
    const big = new Uint8Array(file.length + 3);
    big.set(file, 3);
    expect(Array.from(parseNpy(big.subarray(3)).data)).toEqual([1]);
    expect(Array.from(parseNpy(Buffer.from(file)).data)).toEqual([1]);
  });

  it('parseNpyHeader reads a header-only prefix and reports the data offset', () => {
    const file = npy(dict('>f4', '(4, 5)', 'True'), []);
    expect(parseNpyHeader(file, 'x.npy')).toEqual({ dtype: 'f32', littleEndian: false, fortranOrder: true, shape: [4, 5], dataOffset: 128 });
    expect(parseNpyHeader(npy(dict('<f4', '(0, 7)'), [], { major: 2, align: 16 })).dataOffset).toBe(80);
  });
});

describe('formatNpy', () => {
  it('writes the exact bytes for a small 2-D float64 array', () => {
    // DOC: 10 bytes of magic, version and u2 length, then the header. The dict is
    // 59 characters; 10 + 59 + 1 = 70 rounds up to 128, so HEADER_LEN = 118
    // (0x76) made of the dict, 58 spaces and '\n'. binary64 little-endian 1..6 follow.
    const header = "{'descr': '<f8', 'fortran_order': False, 'shape': (2, 3), }" + ' '.repeat(58) + '\n';
    const expected = Uint8Array.from([
      ...hex('934e554d5059 01 00 7600'),
      ...ascii(header),
      ...hex('000000000000f03f 0000000000000040 0000000000000840 0000000000001040 0000000000001440 0000000000001840'),
    ]);
    const out = formatNpy({ data: new Float64Array([1, 2, 3, 4, 5, 6]), shape: [2, 3], dtype: 'f64' });
    expect(out.length).toBe(176);
    expect(Array.from(out)).toEqual(Array.from(expected));
  });

  it('writes 1-D and 0-d shapes as Python tuples "(3,)" and "()"', () => {
    const text = (b: Uint8Array): string => String.fromCharCode(...b.subarray(10, 128));
    // 57-character dict: 10 + 57 + 1 = 68 -> 128, so 60 spaces; 55-character dict: 62 spaces.
    expect(text(formatNpy({ data: new Float32Array(3), shape: [3], dtype: 'f32' }))).toBe(dict('<f4', '(3,)') + ' '.repeat(60) + '\n');
    const scalar = formatNpy({ data: new Float32Array([1]), shape: [], dtype: 'f32' });
    expect(text(scalar)).toBe(dict('<f4', '()') + ' '.repeat(62) + '\n');
    expect(Array.from(scalar.subarray(128))).toEqual([0x00, 0x00, 0x80, 0x3f]);
  });

  it('switches to version 2.0 when the header needs more than 65535 bytes', () => {
    const shape = new Array<number>(22000).fill(1); // "1, " x 22000 > 65535 characters
    const out = formatNpy({ data: new Float32Array([2]), shape, dtype: 'f32' });
    const len = new DataView(out.buffer).getUint32(8, true);
    expect([out[6], out[7]]).toEqual([2, 0]); // DOC: version 2.0, u4 HEADER_LEN
    expect(len).toBeGreaterThan(65535);
    expect((12 + len) % 64).toBe(0);
    expect(out[12 + len - 1]).toBe(0x0a);
    expect(out.length).toBe(12 + len + 4);
    // This reader limits ndim to 32, so it refuses such a file.
    expectInputError(() => parseNpy(out), InputCode.Shape, /22000 axes, more than the limit of 32/);
  });

  it('round-trips arrays of any shape and both dtypes, bit for bit', () => {
    const shapes = fc.array(fc.integer({ min: 0, max: 4 }), { maxLength: 4 });
    fc.assert(
      fc.property(shapes, fc.boolean(), fc.integer(), (shape, f32, seed) => {
        const n = shape.reduce((a, b) => a * b, 1);
        const bits = new Uint32Array(n * (f32 ? 1 : 2)).map((_, i) => Math.imul(i + 1, 0x9e3779b1) ^ seed);
        const data = f32 ? new Float32Array(bits.buffer) : new Float64Array(bits.buffer);
        const back = parseNpy(formatNpy({ data, shape, dtype: f32 ? 'f32' : 'f64' }));
        expect(back.shape).toEqual(shape);
        expect(back.dtype).toBe(f32 ? 'f32' : 'f64');
        expect(Array.from(new Uint32Array(back.data.buffer))).toEqual(Array.from(bits));
      }),
    );
  });

  it('refuses inconsistent arrays', () => {
    expectInputError(() => formatNpy({ data: new Float64Array(5), shape: [2, 3], dtype: 'f64' }), InputCode.Shape, /shape \[2, 3\] holds 6 values but data has 5/);
    expectInputError(() => formatNpy({ data: new Float32Array(6), shape: [2, 3], dtype: 'f64' }), InputCode.Dtype, /needs a Float64Array but data is a Float32Array/);
    expectInputError(() => formatNpy({ data: new Float32Array(0), shape: [-1], dtype: 'f32' }), InputCode.Shape, /axis 0 .* is -1/);
  });
});

describe('parseNpy: bad input, each with its own message', () => {
  const ok = npy(dict('<f8', '(2, 3)'), new Array(48).fill(0));

  it('bad magic', () => {
    // DOC: the first 6 bytes are exactly "\x93NUMPY".
    const bad = ok.slice();
    bad[5] = 0x5a; // 'Z'
    expectInputError(() => parseNpy(bad, 'x.npy'), InputCode.File, /^x\.npy: not a \.npy file: the first bytes are 93 4e 55 4d 50 5a/);
    expectInputError(() => parseNpy(Uint8Array.from([0x50, 0x4b, 0x03])), InputCode.File, /not a \.npy file: the first bytes are 50 4b 03,/); // a zip (.npz) prefix
  });

  it('unknown format version', () => {
    for (const [major, minor] of [[4, 0], [1, 1], [0, 0]] as const) {
      const bad = ok.slice();
      bad[6] = major;
      bad[7] = minor;
      expectInputError(() => parseNpy(bad), InputCode.File, new RegExp(`unsupported \\.npy format version ${major}\\.${minor}`));
    }
  });

  it('truncated header', () => {
    expectInputError(() => parseNpy(ok.subarray(0, 5), 'x.npy'), InputCode.File, /x\.npy: truncated header: 5 bytes, too short for the 8-byte magic/);
    // DOC: version 1.0 has a 2-byte length; 2.0 a 4-byte one.
    expectInputError(() => parseNpy(ok.subarray(0, 9)), InputCode.File, /truncated header: 9 bytes, too short for the 2-byte header length of format 1\.0/);
    const v2 = npy(dict('<f4', '()'), [], { major: 2 });
    expectInputError(() => parseNpy(v2.subarray(0, 11)), InputCode.File, /4-byte header length of format 2\.0/);
  });

  it('header length beyond the file', () => {
    // HEADER_LEN 118 but only 100 bytes in the file.
    expectInputError(() => parseNpy(ok.subarray(0, 100)), InputCode.File, /header length 118 at offset 8 runs past the end of the file \(100 bytes/);
    // More than 1 MiB is refused even before looking for the bytes.
    const huge = Uint8Array.from([0x93, ...ascii('NUMPY'), 2, 0, 0x01, 0x00, 0x10, 0x00]);
    expectInputError(() => parseNpyHeader(huge), InputCode.File, /header length 1048577 bytes exceeds the limit of 1048576/);
  });

  it('dtypes other than float32 and float64', () => {
    const cases: Array<[string, RegExp]> = [
      ["'<i4'", /unsupported dtype '<i4'/],
      ["'<c8'", /unsupported dtype '<c8'/],
      ["'<f2'", /unsupported dtype '<f2'/],
      ["'|O'", /unsupported dtype '\|O'/],
      ["'|f4'", /byte order '\|' \(not applicable\) is meaningless for a 4-byte float '\|f4'/],
      ["[('x', '<f4'), ('y', '<f4')]", /unsupported structured or compound dtype \[\('x', '<f4'\), \('y', '<f4'\)\]/],
    ];
    for (const [descr, message] of cases) {
      const file = npy(`{'descr': ${descr}, 'fortran_order': False, 'shape': (1,), }`, new Array(8).fill(0));
      expectInputError(() => parseNpy(file), InputCode.Dtype, message);
    }
  });

  it('data too short and data too long', () => {
    expectInputError(() => parseNpy(ok.subarray(0, ok.length - 8), 'x.npy'), InputCode.File,
      /^x\.npy: header declares shape \(2, 3\) = 6 values of 8 bytes but the data holds 40 bytes \(file truncated\?\)$/);
    expectInputError(() => parseNpy(Uint8Array.from([...ok, 1, 2, 3, 4, 5, 6, 7, 8]), 'x.npy'), InputCode.File,
      /^x\.npy: header declares shape \(2, 3\) = 6 values of 8 bytes but the data holds 56 bytes \(8 extra bytes\)$/);
    expectInputError(() => parseNpy(npy(dict('<f4', '()'), [])), InputCode.File, /shape \(\) = 1 values of 4 bytes but the data holds 0 bytes/);
  });

  it('malformed header dicts', () => {
    const cases: Array<[string, RegExp]> = [
      ["{'descr': '<f8', 'fortran_order': False, 'shape': (1,), ", /malformed header: expected a string key or '}' at offset \d+, found end of header/],
      ["{'descr': '<f8' 'fortran_order': False, 'shape': (1,)}", /malformed header: expected ',' or '}'/],
      ["{'descr': '<f8', 'fortran_order': False, 'shape': (1,)} x", /unexpected text after the literal/],
      ["{'descr': '<f8', 'fortran_order': False, 'shape': (2+3,)}", /expected ',' or '\)'/],
      ["{'descr': '<f8', 'fortran_order': False, 'shape': (01,)}", /integer with leading zero/],
      ["{'descr': '<f8', 'fortran_order': False, 'shape': (1.0,)}", /only plain decimal integers/],
      ["{'descr': '<\\f8', 'fortran_order': False, 'shape': (1,)}", /escape sequences are not supported/],
      ["{'descr': '<f8', 'fortran_order': false, 'shape': (1,)}", /expected a literal/],
      ["{descr: '<f8', 'fortran_order': False, 'shape': (1,)}", /expected a string key/],
      ["['descr', '<f8']", /header is not a dict but \['descr', '<f8'\]/],
      ["{'descr': '<f8', 'fortran_order': False}", /header lacks the key 'shape'/],
      ["{'descr': '<f8', 'fortran_order': False, 'shape': (1,), 'extra': 1}", /unexpected key 'extra'/],
      ["{'descr': '<f8', 'shape': (1,), 'fortran_order': False, 'shape': (1,)}", /the key 'shape' twice/],
      ["{'descr': '<f8', 'fortran_order': 0, 'shape': (1,)}", /fortran_order must be True or False, not 0/],
      ['', /malformed header: it holds only whitespace, no dict/],
    ];
    for (const [text, message] of cases) expectInputError(() => parseNpy(npy(text, new Array(8).fill(0))), InputCode.File, message);
    const v3 = npy(dict('<f8', '(1,)'), new Array(8).fill(0), { major: 3 });
    v3[12] = 0xff; // DOC, "Format Version 3.0": the header is UTF-8.
    expectInputError(() => parseNpy(v3), InputCode.File, /format 3\.0 file is not valid UTF-8/);
  });

  it('bad shapes: negative, non-tuple, non-integer, too many axes, too many values', () => {
    const cases: Array<[string, RegExp]> = [
      ['(2, -3)', /axis 1 of shape \(2, -3\) is negative \(-3\)/],
      ['(5)', /shape must be a tuple of integers, not \(5\)/], // "(5)" is 5, not a tuple
      ['[5]', /shape must be a tuple of integers, not \[5\]/],
      ["(2, '3')", /axis 1 of shape \(2, '3'\) is '3', not an integer/],
      [`(${new Array(33).fill(1).join(', ')})`, /33 axes, more than the limit of 32/],
      ['(9007199254740992,)', /axis 0 .* is 9007199254740992, more than 2\^53 - 1/],
      ['(4294967296, 4294967296)', /shape \(4294967296, 4294967296\) holds 18446744073709551616 values, more than 2\^53 - 1/],
    ];
    for (const [shape, message] of cases) expectInputError(() => parseNpy(npy(dict('<f8', shape), [])), InputCode.Shape, message);
  });
});
