/**
 * The in-memory array type shared by the file readers and writers in
 * `src/io`, with the byte-level helpers they have in common: element sizes,
 * shape arithmetic with overflow checks, and copying floats to and from
 * bytes in either byte order.
 */

import { InputCode, InputError } from '../errors.js';

import type { Dtype } from '../types.js';

/** Element type of a field (the library's one type for it, from src/types.ts), for the readers and writers that import it from here. */
export type { Dtype };

/**
 * A dense array in C (row-major) order. `data` holds the product of `shape`
 * values in the machine's native byte order; `shape` is empty for a 0-d
 * (scalar) array, which holds exactly one value.
 */
export interface NdArray {
  data: Float32Array | Float64Array;
  shape: number[];
  dtype: Dtype;
}

/** Most axes a shape may have (NumPy's own limit for format 1.0 headers). */
export const MAX_NDIM = 32;

/** True when this machine stores multi-byte numbers little-endian first. */
export const HOST_LITTLE_ENDIAN = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

/** Bytes per element of `dtype`. */
export function itemSize(dtype: Dtype): 4 | 8 {
  return dtype === 'f32' ? 4 : 8;
}

/**
 * Product of `dims`, refusing (InputError Shape, message prefixed by
 * `where`) any product above 2^53 - 1, where integer arithmetic on numbers
 * stops being exact. `describe` renders the shape for the message.
 */
export function checkedProduct(dims: readonly number[], where: string, describe: string): number {
  let product = 1n;
  for (const d of dims) product *= BigInt(d);
  if (product > BigInt(Number.MAX_SAFE_INTEGER)) {
    throw new InputError(
      InputCode.Shape,
      `${where}: shape ${describe} holds ${product} values, more than 2^53 - 1`,
    );
  }
  return Number(product);
}

/**
 * Checks that `arr` is a consistent {@link NdArray} before it is written:
 * a known dtype backed by the matching typed array, a shape of non-negative
 * safe integers, and a data length equal to the shape's product. Returns the
 * element count.
 */
export function validateNdArray(arr: NdArray, where: string): number {
  const { data, shape, dtype } = arr;
  if (dtype !== 'f32' && dtype !== 'f64') {
    throw new InputError(InputCode.Dtype, `${where}: unknown dtype ${JSON.stringify(dtype)}, expected 'f32' or 'f64'`);
  }
  const want = dtype === 'f32' ? Float32Array : Float64Array;
  if (!(data instanceof want)) {
    const got = (data as object | null)?.constructor?.name ?? String(data);
    throw new InputError(InputCode.Dtype, `${where}: dtype ${dtype} needs a ${want.name} but data is a ${got}`);
  }
  if (!Array.isArray(shape)) {
    throw new InputError(InputCode.Shape, `${where}: shape must be an array of integers`);
  }
  shape.forEach((d, axis) => {
    if (!Number.isSafeInteger(d) || d < 0) {
      throw new InputError(InputCode.Shape, `${where}: axis ${axis} of shape [${shape.join(', ')}] is ${d}, not a non-negative integer`);
    }
  });
  const count = checkedProduct(shape, where, `[${shape.join(', ')}]`);
  if (count !== data.length) {
    throw new InputError(
      InputCode.Shape,
      `${where}: shape [${shape.join(', ')}] holds ${count} values but data has ${data.length}`,
    );
  }
  return count;
}

/** Reverses the byte order of every `size`-byte element of `bytes`, in place. */
export function swapBytes(bytes: Uint8Array, size: number): void {
  for (let i = 0; i + size <= bytes.length; i += size) {
    for (let a = i, b = i + size - 1; a < b; a++, b--) {
      const t = bytes[a]!;
      bytes[a] = bytes[b]!;
      bytes[b] = t;
    }
  }
}

/**
 * Copies `count` elements of `dtype` stored at `bytes[offset..]` in the given
 * byte order into a new native-order typed array. The bytes are copied
 * verbatim (then swapped if needed), so NaN payloads survive.
 */
export function decodeFloats(
  bytes: Uint8Array,
  offset: number,
  count: number,
  dtype: Dtype,
  littleEndian: boolean,
): Float32Array | Float64Array {
  const size = itemSize(dtype);
  // Copy explicitly: `slice` on a Node Buffer returns a view, not a copy.
  const copy = new Uint8Array(count * size);
  copy.set(bytes.subarray(offset, offset + count * size));
  if (littleEndian !== HOST_LITTLE_ENDIAN) swapBytes(copy, size);
  return dtype === 'f32' ? new Float32Array(copy.buffer, 0, count) : new Float64Array(copy.buffer, 0, count);
}

/** Copies the elements of `data` into new bytes in the given byte order. */
export function encodeFloats(data: Float32Array | Float64Array, littleEndian: boolean): Uint8Array {
  const bytes = new Uint8Array(data.byteLength);
  bytes.set(new Uint8Array(data.buffer, data.byteOffset, data.byteLength));
  if (littleEndian !== HOST_LITTLE_ENDIAN) swapBytes(bytes, data.BYTES_PER_ELEMENT);
  return bytes;
}
