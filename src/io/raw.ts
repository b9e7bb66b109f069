/**
 * Headerless ("raw") binary float files, whose shape, dtype and byte order
 * the caller supplies, and the parsers for the command-line spellings of
 * shape and dtype.
 */

import { InputCode, InputError } from '../errors.js';
import {
  type Dtype,
  type NdArray,
  MAX_NDIM,
  checkedProduct,
  decodeFloats,
  encodeFloats,
  itemSize,
  validateNdArray,
} from './ndarray.js';

export type { Dtype, NdArray } from './ndarray.js';

function checkEndian(endian: unknown, where: string): asserts endian is 'little' | 'big' {
  if (endian !== 'little' && endian !== 'big') {
    throw new InputError(InputCode.Option, `${where}: byte order must be 'little' or 'big', not ${JSON.stringify(endian)}`);
  }
}

/**
 * Interprets `bytes` as a C-order array of `shape` (one or more positive
 * integers, at most 32 axes) and `dtype`, stored in the `endian` byte order,
 * and returns it in native order. The byte count must equal the shape's
 * product times the element size exactly, else InputError Shape; a bad
 * shape is InputError Shape, a bad dtype Dtype, a bad endian Option. `name`
 * prefixes every message.
 */
export function parseRaw(
  bytes: Uint8Array,
  shape: number[],
  dtype: Dtype,
  endian: 'little' | 'big',
  name = 'input',
): NdArray {
  if (dtype !== 'f32' && dtype !== 'f64') {
    throw new InputError(InputCode.Dtype, `${name}: unknown dtype ${JSON.stringify(dtype)}, expected 'f32' or 'f64'`);
  }
  checkEndian(endian, name);
  if (!Array.isArray(shape) || shape.length === 0 || shape.length > MAX_NDIM) {
    throw new InputError(InputCode.Shape, `${name}: shape must have 1 to ${MAX_NDIM} axes, got ${JSON.stringify(shape)}`);
  }
  shape.forEach((d, axis) => {
    if (!Number.isSafeInteger(d) || d < 1) {
      throw new InputError(InputCode.Shape, `${name}: axis ${axis} of shape ${shape.join('x')} is ${d}, not a positive integer`);
    }
  });
  const count = checkedProduct(shape, name, shape.join('x'));
  const size = itemSize(dtype);
  if (bytes.length !== count * size) {
    throw new InputError(
      InputCode.Shape,
      `${name}: shape ${shape.join('x')} of ${dtype} needs ${count} values of ${size} bytes = ${count * size} bytes ` +
        `but the file holds ${bytes.length} bytes`,
    );
  }
  return { data: decodeFloats(bytes, 0, count, dtype, endian === 'little'), shape: [...shape], dtype };
}

/**
 * Writes the values of `arr` in C order with no header, in the given byte
 * order (default little-endian). Throws InputError Dtype or Shape when `arr`
 * is inconsistent, Option for a bad `endian`.
 */
export function formatRaw(arr: NdArray, endian: 'little' | 'big' = 'little'): Uint8Array {
  checkEndian(endian, 'formatRaw');
  validateNdArray(arr, 'formatRaw');
  return encodeFloats(arr.data, endian === 'little');
}

/**
 * Parses a shape written as "RxC" (2-D), "AxBxC" (3-D) and so on up to
 * {@link MAX_NDIM} axes: positive decimal
 * integers without signs, spaces or leading zeros, joined by a lowercase
 * 'x'. Anything else, or a shape of more than 2^53 - 1 values, throws
 * InputError Shape.
 */
export function parseShape(text: string): number[] {
  const parts = typeof text === 'string' ? text.split('x') : [];
  if (parts.length < 2 || parts.length > MAX_NDIM || !parts.every((p) => /^[1-9][0-9]*$/.test(p))) {
    throw new InputError(
      InputCode.Shape,
      `shape ${JSON.stringify(text)} is not of the form RxC, AxBxC, ... (2 to ${MAX_NDIM} positive integers, e.g. 512x512 or 12x90x180)`,
    );
  }
  const dims = parts.map(Number);
  dims.forEach((d, axis) => {
    if (!Number.isSafeInteger(d)) {
      throw new InputError(InputCode.Shape, `shape ${JSON.stringify(text)}: axis ${axis} is larger than 2^53 - 1`);
    }
  });
  checkedProduct(dims, 'parseShape', text);
  return dims;
}

const DTYPE_NAMES: Record<string, Dtype> = { f32: 'f32', float32: 'f32', f64: 'f64', float64: 'f64' };

/**
 * Parses a dtype name: 'f32' or 'float32' give 'f32', 'f64' or 'float64'
 * give 'f64' (exact, lowercase). Anything else throws InputError Dtype.
 */
export function parseDtype(text: string): Dtype {
  const dtype = Object.hasOwn(DTYPE_NAMES, text) ? DTYPE_NAMES[text] : undefined;
  if (dtype === undefined) {
    throw new InputError(InputCode.Dtype, `unknown dtype ${JSON.stringify(text)}; expected f32, float32, f64 or float64`);
  }
  return dtype;
}
