import { describe, expect, it } from 'vitest';
import { InputCode, InputError } from '../../src/errors.js';
import { formatRaw, parseDtype, parseRaw, parseShape } from '../../src/io/raw.js';

// IEEE 754 bit patterns below are from memory, checked with Python's struct module.

/** Bytes from a hex string; spaces are ignored. */
function hex(s: string): Uint8Array {
  const t = s.replace(/\s+/g, '');
  return Uint8Array.from({ length: t.length / 2 }, (_, i) => parseInt(t.slice(2 * i, 2 * i + 2), 16));
}

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

// binary32: 1.0 = 3f800000, 2.0 = 40000000, -1.5 = bfc00000, 0.5 = 3f000000, 3.0 = 40400000, 4.0 = 40800000
const F32_BE = hex('3f800000 40000000 bfc00000 3f000000 40400000 40800000');
const F32_LE = hex('0000803f 00000040 0000c0bf 0000003f 00004040 00008040');
// binary64: 1.0 = 3ff0000000000000, -2.0 = c000000000000000
const F64_BE = hex('3ff0000000000000 c000000000000000');
const F64_LE = hex('000000000000f03f 00000000000000c0');

describe('parseRaw', () => {
  it('reads little- and big-endian float32 and float64', () => {
    const a = parseRaw(F32_LE, [2, 3], 'f32', 'little');
    expect(a).toEqual({ data: new Float32Array([1, 2, -1.5, 0.5, 3, 4]), shape: [2, 3], dtype: 'f32' });
    expect(Array.from(parseRaw(F32_BE, [3, 2], 'f32', 'big').data)).toEqual([1, 2, -1.5, 0.5, 3, 4]);
    const b = parseRaw(F64_BE, [1, 2], 'f64', 'big');
    expect(b.data).toBeInstanceOf(Float64Array);
    expect(Array.from(b.data)).toEqual([1, -2]);
    expect(Array.from(parseRaw(F64_LE, [2], 'f64', 'little').data)).toEqual([1, -2]);
  });

  it('copies: the result shares neither bytes nor shape with the arguments', () => {
    const bytes = F32_LE.slice();
    const shape = [6];
    const a = parseRaw(bytes, shape, 'f32', 'little');
    bytes.fill(0);
    shape[0] = 99;
    expect(a.data[0]).toBe(1);
    expect(a.shape).toEqual([6]);
  });

  it('reads from a view with a non-zero, unaligned byte offset (e.g. a Node Buffer)', () => {
    const big = new Uint8Array(F64_LE.length + 5);
    big.set(F64_LE, 5);
    expect(Array.from(parseRaw(big.subarray(5), [2], 'f64', 'little', 'x.raw').data)).toEqual([1, -2]);
    expect(Array.from(parseRaw(Buffer.from(F32_BE), [6], 'f32', 'big').data)).toEqual([1, 2, -1.5, 0.5, 3, 4]);
  });

  it('refuses a byte count that does not match the shape exactly', () => {
    expectInputError(() => parseRaw(F32_LE.subarray(0, 20), [2, 3], 'f32', 'little', 'x.raw'), InputCode.Shape,
      /^x\.raw: shape 2x3 of f32 needs 6 values of 4 bytes = 24 bytes but the file holds 20 bytes$/);
    expectInputError(() => parseRaw(F32_LE, [5], 'f32', 'little', 'x.raw'), InputCode.Shape,
      /^x\.raw: shape 5 of f32 needs 5 values of 4 bytes = 20 bytes but the file holds 24 bytes$/);
    expectInputError(() => parseRaw(F32_LE, [2, 3], 'f64', 'little'), InputCode.Shape, /needs 6 values of 8 bytes = 48 bytes but the file holds 24/);
  });

  it('refuses bad shapes, dtypes and byte orders', () => {
    expectInputError(() => parseRaw(F32_LE, [], 'f32', 'little'), InputCode.Shape, /shape must have 1 to 32 axes, got \[\]/);
    expectInputError(() => parseRaw(F32_LE, new Array(33).fill(1), 'f32', 'little'), InputCode.Shape, /1 to 32 axes/);
    expectInputError(() => parseRaw(F32_LE, [6, 0], 'f32', 'little'), InputCode.Shape, /axis 1 of shape 6x0 is 0, not a positive integer/);
    expectInputError(() => parseRaw(F32_LE, [-6], 'f32', 'little'), InputCode.Shape, /axis 0 of shape -6 is -6/);
    expectInputError(() => parseRaw(F32_LE, [1.5, 4], 'f32', 'little'), InputCode.Shape, /axis 0 of shape 1\.5x4 is 1\.5/);
    expectInputError(() => parseRaw(F32_LE, [2 ** 27, 2 ** 27], 'f32', 'little'), InputCode.Shape, /holds 18014398509481984 values, more than 2\^53 - 1/);
    expectInputError(() => parseRaw(F32_LE, [6], 'i32' as 'f32', 'little'), InputCode.Dtype, /unknown dtype "i32"/);
    expectInputError(() => parseRaw(F32_LE, [6], 'f32', 'native' as 'little'), InputCode.Option, /byte order must be 'little' or 'big', not "native"/);
  });
});

describe('formatRaw', () => {
  it('writes little-endian by default and big-endian on request', () => {
    const arr = { data: new Float32Array([1, 2, -1.5, 0.5, 3, 4]), shape: [2, 3], dtype: 'f32' as const };
    expect(Array.from(formatRaw(arr))).toEqual(Array.from(F32_LE));
    expect(Array.from(formatRaw(arr, 'big'))).toEqual(Array.from(F32_BE));
    const f64 = { data: new Float64Array([1, -2]), shape: [2], dtype: 'f64' as const };
    expect(Array.from(formatRaw(f64, 'little'))).toEqual(Array.from(F64_LE));
    expect(Array.from(formatRaw(f64, 'big'))).toEqual(Array.from(F64_BE));
  });

  it('writes only the viewed part of a typed array that is a window into a larger buffer', () => {
    const window = new Float64Array([9, 1, -2, 9]).subarray(1, 3);
    expect(Array.from(formatRaw({ data: window, shape: [2], dtype: 'f64' }, 'big'))).toEqual(Array.from(F64_BE));
  });

  it('round-trips through parseRaw bit for bit, NaN payloads included', () => {
    const bits = new Uint32Array([0x7fa00001, 0xff800000, 0x80000000, 0x00000001, 0x7f7fffff, 0x3eaaaaab]);
    const arr = { data: new Float32Array(bits.buffer), shape: [3, 2], dtype: 'f32' as const };
    for (const endian of ['little', 'big'] as const) {
      const back = parseRaw(formatRaw(arr, endian), [3, 2], 'f32', endian);
      expect(Array.from(new Uint32Array(back.data.buffer))).toEqual(Array.from(bits));
    }
  });

  it('refuses inconsistent arrays and bad byte orders', () => {
    expectInputError(() => formatRaw({ data: new Float32Array(5), shape: [2, 3], dtype: 'f32' }), InputCode.Shape, /holds 6 values but data has 5/);
    expectInputError(() => formatRaw({ data: new Float64Array(6), shape: [2, 3], dtype: 'f32' }), InputCode.Dtype, /needs a Float32Array but data is a Float64Array/);
    expectInputError(() => formatRaw({ data: new Float32Array(1), shape: [1], dtype: 'f32' }, 'BIG' as 'big'), InputCode.Option, /not "BIG"/);
  });
});

describe('parseShape', () => {
  it('reads RxC, AxBxC and more axes', () => {
    expect(parseShape('512x256')).toEqual([512, 256]);
    expect(parseShape('64x32x1')).toEqual([64, 32, 1]);
    expect(parseShape('1x2x3x4')).toEqual([1, 2, 3, 4]);
    expect(parseShape('1x9007199254740991')).toEqual([1, 9007199254740991]);
  });

  it('refuses anything else with InputError Shape', () => {
    const bad = ['', '512', Array(33).fill('1').join('x'), '0x5', '5x0', '-1x5', '+1x5', '1.5x2', '1e3x2', '5X5', '5*5', ' 5x5', '5x5 ', '5 x 5', '5x', 'x5', '05x5', '0x10x5'];
    for (const text of bad) {
      expectInputError(() => parseShape(text), InputCode.Shape, /is not of the form RxC, AxBxC, \.\.\. \(2 to 32 positive integers/);
    }
    expectInputError(() => parseShape('9007199254740992x1'), InputCode.Shape, /axis 0 is larger than 2\^53 - 1/);
    expectInputError(() => parseShape('100000000x100000000x1000'), InputCode.Shape, /holds 10000000000000000000 values, more than 2\^53 - 1/);
  });
});

describe('parseDtype', () => {
  it('maps the four accepted names', () => {
    expect(['f32', 'float32', 'f64', 'float64'].map(parseDtype)).toEqual(['f32', 'f32', 'f64', 'f64']);
  });

  it('refuses anything else with InputError Dtype, including names inherited by plain objects', () => {
    for (const text of ['', 'F32', 'Float64', 'float', 'f16', 'int32', '<f4', ' f32', 'toString', '__proto__', 'constructor']) {
      expectInputError(() => parseDtype(text), InputCode.Dtype, /unknown dtype .*; expected f32, float32, f64 or float64/);
    }
  });
});
