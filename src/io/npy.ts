/**
 * Reading and writing NumPy `.npy` files of float32 and float64 arrays, as
 * pure functions on bytes. The layout follows the format description in the
 * `numpy.lib.format` module docstring: the magic `\x93NUMPY`, a major and
 * minor version byte, a little-endian header length (u2 in version 1.0, u4 in
 * 2.0 and 3.0), a Python-literal dict header (latin-1 in 1.0/2.0, UTF-8 in
 * 3.0) padded with spaces and ended by '\n', then the raw array data.
 */

import { InputCode, InputError } from '../errors.js';
import {
  type Dtype,
  type NdArray,
  HOST_LITTLE_ENDIAN,
  MAX_NDIM,
  checkedProduct,
  decodeFloats,
  encodeFloats,
  itemSize,
  validateNdArray,
} from './ndarray.js';
import { type PyValue, parsePyLiteral, pyRepr } from './pylit.js';

export type { Dtype, NdArray } from './ndarray.js';

/** The six magic bytes that open every .npy file: "\x93NUMPY". */
const MAGIC = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59] as const;
/** Longest header accepted, in bytes (1 MiB). */
export const MAX_NPY_HEADER_BYTES = 1 << 20;
/** Data starts at a multiple of this many bytes in files written here. */
const ALIGN = 64;

/** The fields of a .npy header, as returned by {@link parseNpyHeader}. */
export interface NpyHeader {
  /** Element type: float32 or float64. */
  dtype: Dtype;
  /** Byte order of the stored data (after resolving '=' to this machine's). */
  littleEndian: boolean;
  /** True when the data is stored in Fortran (column-major) order. */
  fortranOrder: boolean;
  /** Array shape; empty for a 0-d array, which holds one value. */
  shape: number[];
  /** Byte offset of the first data byte from the start of the file. */
  dataOffset: number;
}

/** Renders a shape the way Python prints a tuple: "()", "(5,)", "(2, 3)". */
function pyTuple(shape: readonly number[]): string {
  return shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
}

/** Decodes latin-1: each byte is the character with that code. */
function latin1(bytes: Uint8Array): string {
  let text = '';
  for (let i = 0; i < bytes.length; i += 4096) text += String.fromCharCode(...bytes.subarray(i, i + 4096));
  return text;
}

function fileError(where: string, message: string): never {
  throw new InputError(InputCode.File, `${where}: ${message}`);
}

/** Maps a descr string to a dtype and byte order, or refuses it. */
function interpretDescr(descr: string, where: string): { dtype: Dtype; littleEndian: boolean } {
  const m = /^([<>=|])f([48])$/.exec(descr);
  if (m && m[1] !== '|') {
    return { dtype: m[2] === '4' ? 'f32' : 'f64', littleEndian: m[1] === '=' ? HOST_LITTLE_ENDIAN : m[1] === '<' };
  }
  const why = m
    ? `byte order '|' (not applicable) is meaningless for a ${m[2]}-byte float`
    : 'unsupported dtype';
  throw new InputError(
    InputCode.Dtype,
    `${where}: ${why} '${descr}'; only float32 ('<f4', '>f4', '=f4') and float64 ('<f8', '>f8', '=f8') are supported`,
  );
}

/** Checks the header dict and extracts its three fields. */
function interpretHeader(text: string, dict: PyValue, where: string): Omit<NpyHeader, 'dataOffset'> {
  if (dict.kind !== 'dict') fileError(where, `header is not a dict but ${pyRepr(text, dict)}`);
  const fields = new Map<string, PyValue>();
  for (const { key, value } of dict.entries) {
    if (fields.has(key)) fileError(where, `header has the key '${key}' twice`);
    if (key !== 'descr' && key !== 'fortran_order' && key !== 'shape') {
      fileError(where, `header has the unexpected key '${key}' (expected descr, fortran_order, shape)`);
    }
    fields.set(key, value);
  }
  for (const key of ['descr', 'fortran_order', 'shape']) {
    if (!fields.has(key)) fileError(where, `header lacks the key '${key}'`);
  }
  const descr = fields.get('descr')!;
  const order = fields.get('fortran_order')!;
  const shapeValue = fields.get('shape')!;

  if (descr.kind !== 'str') {
    throw new InputError(
      InputCode.Dtype,
      `${where}: unsupported structured or compound dtype ${pyRepr(text, descr)}; only float32 and float64 are supported`,
    );
  }
  const { dtype, littleEndian } = interpretDescr(descr.value, where);
  if (order.kind !== 'bool') fileError(where, `fortran_order must be True or False, not ${pyRepr(text, order)}`);

  if (shapeValue.kind !== 'tuple') {
    throw new InputError(InputCode.Shape, `${where}: shape must be a tuple of integers, not ${pyRepr(text, shapeValue)}`);
  }
  if (shapeValue.items.length > MAX_NDIM) {
    throw new InputError(InputCode.Shape, `${where}: shape has ${shapeValue.items.length} axes, more than the limit of ${MAX_NDIM}`);
  }
  const shape = shapeValue.items.map((item, axis) => {
    if (item.kind !== 'int') {
      throw new InputError(InputCode.Shape, `${where}: axis ${axis} of shape ${pyRepr(text, shapeValue)} is ${pyRepr(text, item)}, not an integer`);
    }
    if (item.value < 0n) {
      throw new InputError(InputCode.Shape, `${where}: axis ${axis} of shape ${pyRepr(text, shapeValue)} is negative (${item.value})`);
    }
    if (item.value > BigInt(Number.MAX_SAFE_INTEGER)) {
      throw new InputError(InputCode.Shape, `${where}: axis ${axis} of shape ${pyRepr(text, shapeValue)} is ${item.value}, more than 2^53 - 1`);
    }
    return Number(item.value);
  });
  checkedProduct(shape, where, pyTuple(shape));
  return { dtype, littleEndian, fortranOrder: order.value, shape };
}

/**
 * Reads only the header of a .npy file (format 1.0, 2.0 or 3.0): dtype,
 * byte order, storage order, shape and where the data starts. `bytes` needs
 * to hold the header but not the data, so a streaming reader can pass a
 * prefix. Throws InputError File for a bad magic, version or header, Dtype
 * for anything but float32/float64, Shape for a bad shape (non-integer or
 * negative axes, more than 32 axes, more than 2^53 - 1 values). `name`
 * prefixes every message.
 */
export function parseNpyHeader(bytes: Uint8Array, name = 'input'): NpyHeader {
  if (MAGIC.some((b, i) => i < bytes.length && bytes[i] !== b)) {
    const hex = Array.from(bytes.subarray(0, 6), (b) => b.toString(16).padStart(2, '0')).join(' ');
    fileError(name, `not a .npy file: the first bytes are ${hex}, not the magic 93 4e 55 4d 50 59 ("\\x93NUMPY")`);
  }
  if (bytes.length < 8) fileError(name, `truncated header: ${bytes.length} bytes, too short for the 8-byte magic and version`);
  const major = bytes[6]!;
  const minor = bytes[7]!;
  if ((major !== 1 && major !== 2 && major !== 3) || minor !== 0) {
    fileError(name, `unsupported .npy format version ${major}.${minor} (known: 1.0, 2.0, 3.0)`);
  }
  const lengthBytes = major === 1 ? 2 : 4;
  const start = 8 + lengthBytes;
  if (bytes.length < start) {
    fileError(name, `truncated header: ${bytes.length} bytes, too short for the ${lengthBytes}-byte header length of format ${major}.0`);
  }
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const headerLength = major === 1 ? view.getUint16(8, true) : view.getUint32(8, true);
  if (headerLength > MAX_NPY_HEADER_BYTES) {
    fileError(name, `header length ${headerLength} bytes exceeds the limit of ${MAX_NPY_HEADER_BYTES}`);
  }
  if (start + headerLength > bytes.length) {
    fileError(name, `header length ${headerLength} at offset 8 runs past the end of the file (${bytes.length} bytes, header would end at ${start + headerLength})`);
  }
  const raw = bytes.subarray(start, start + headerLength);
  let text: string;
  if (major === 3) {
    try {
      text = new TextDecoder('utf-8', { fatal: true }).decode(raw);
    } catch {
      fileError(name, 'header of a format 3.0 file is not valid UTF-8');
    }
  } else {
    text = latin1(raw);
  }
  // Python 2 writers could put a long suffix on integers: "(3L, 4L)".
  const dict = parsePyLiteral(text, name, { allowLongSuffix: major < 3 });
  return { ...interpretHeader(text, dict, name), dataOffset: start + headerLength };
}

/**
 * Rewrites Fortran-order (column-major) data into C order. Works on 32-bit
 * words so NaN payloads are copied bit for bit.
 */
function fortranToC(data: Float32Array | Float64Array, shape: readonly number[]): void {
  const n = data.length;
  if (shape.length < 2 || n === 0) return;
  const words = data.BYTES_PER_ELEMENT / 4;
  const src = new Uint32Array(data.buffer.slice(data.byteOffset, data.byteOffset + data.byteLength));
  const dst = new Uint32Array(data.buffer, data.byteOffset, n * words);
  const nd = shape.length;
  const stride: number[] = []; // Fortran strides in elements: axis 0 is contiguous
  for (let k = 0, s = 1; k < nd; s *= shape[k]!, k++) stride.push(s);
  const idx = new Array<number>(nd).fill(0);
  let f = 0;
  for (let c = 0; c < n; c++) {
    for (let w = 0; w < words; w++) dst[c * words + w] = src[f * words + w]!;
    for (let k = nd - 1; k >= 0; k--) {
      f += stride[k]!;
      if (++idx[k]! < shape[k]!) break;
      f -= stride[k]! * shape[k]!;
      idx[k] = 0;
    }
  }
}

/**
 * Parses a whole .npy file of float32 or float64 values into a native-order,
 * C-order {@link NdArray}. Big-endian data is byte-swapped and Fortran-order
 * data is reordered. The data must be exactly as long as the header's shape
 * and dtype say: short or extra bytes are refused with InputError File.
 * Header problems are reported as by {@link parseNpyHeader}.
 */
export function parseNpy(bytes: Uint8Array, name = 'input'): NdArray {
  const header = parseNpyHeader(bytes, name);
  const count = checkedProduct(header.shape, name, pyTuple(header.shape));
  const size = itemSize(header.dtype);
  const available = bytes.length - header.dataOffset;
  if (available !== count * size) {
    fileError(
      name,
      `header declares shape ${pyTuple(header.shape)} = ${count} values of ${size} bytes but the data holds ${available} bytes` +
        (available < count * size ? ' (file truncated?)' : ` (${available - count * size} extra bytes)`),
    );
  }
  const data = decodeFloats(bytes, header.dataOffset, count, header.dtype, header.littleEndian);
  if (header.fortranOrder) fortranToC(data, header.shape);
  return { data, shape: header.shape, dtype: header.dtype };
}

/**
 * The header of a .npy file of `shape` and `dtype`, little-endian, C order:
 * format 1.0 unless the header exceeds 65535 bytes (then 2.0). The dict
 * "{'descr': '<f8', 'fortran_order': False, 'shape': (2, 3), }" is followed
 * by spaces and a final '\n' so that the data starts at a multiple of 64
 * bytes. The data may follow in one piece or band by band.
 */
export function npyHeader(shape: readonly number[], dtype: Dtype): Uint8Array {
  const descr = dtype === 'f32' ? '<f4' : '<f8';
  const dict = `{'descr': '${descr}', 'fortran_order': False, 'shape': ${pyTuple(shape)}, }`;
  let major = 1;
  let start = 10;
  let headerLength = Math.ceil((start + dict.length + 1) / ALIGN) * ALIGN - start;
  if (headerLength > 0xffff) {
    major = 2;
    start = 12;
    headerLength = Math.ceil((start + dict.length + 1) / ALIGN) * ALIGN - start;
  }
  const out = new Uint8Array(start + headerLength);
  out.set(MAGIC, 0);
  out[6] = major;
  out[7] = 0;
  const view = new DataView(out.buffer);
  if (major === 1) view.setUint16(8, headerLength, true);
  else view.setUint32(8, headerLength, true);
  for (let i = 0; i < headerLength - 1; i++) out[start + i] = i < dict.length ? dict.charCodeAt(i) : 0x20;
  out[start + headerLength - 1] = 0x0a;
  return out;
}

/**
 * Writes `arr` as a .npy file: {@link npyHeader}, then the values
 * little-endian. Throws InputError Dtype or Shape when `arr` is inconsistent.
 */
export function formatNpy(arr: NdArray): Uint8Array {
  validateNdArray(arr, 'formatNpy');
  const head = npyHeader(arr.shape, arr.dtype);
  const data = encodeFloats(arr.data, true);
  const out = new Uint8Array(head.length + data.length);
  out.set(head, 0);
  out.set(data, head.length);
  return out;
}
