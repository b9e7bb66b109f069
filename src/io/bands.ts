/**
 * Reading 2-D fields from .npy and raw files a band of rows at a time, with
 * random access through a file descriptor, so a field larger than memory can
 * be packed; and writing a .npy file band by band.
 *
 * The reads are synchronous because the encoder asks for bands from inside
 * its (synchronous) tile loop. Before and after every band the file's size
 * and modification time are compared with those seen at open, so a file that
 * is rewritten, grows or shrinks while it is being read is reported instead
 * of being packed from a mixture of old and new bytes.
 */
import { closeSync, fstatSync, fsyncSync, openSync, readSync, writeSync } from 'node:fs';
import { InputCode, InputError } from '../errors.js';
import type { BandSource } from '../codec/tiles.js';
import type { Dtype, FloatArray } from '../types.js';
import { HOST_LITTLE_ENDIAN, checkedProduct, itemSize, swapBytes } from './ndarray.js';
import { MAX_NPY_HEADER_BYTES, npyHeader, parseNpy, parseNpyHeader } from './npy.js';
import { openRegularSync } from './regular-file.js';

/**
 * A field read a band of rows at a time from a file: the encoder's
 * BandSource, with what the file says of the field and a close. An N-D array
 * in C order is read as the 2-D matrix of its values: all axes but the last as rows.
 */
export interface BandReader extends BandSource {
  /** [rows, cols] of the matrix read: the product of all axes but the last, and the last. */
  readonly shape: [number, number];
  /** The array's own shape (2 or more axes; equal to `shape` for a 2-D array). */
  readonly ndShape: number[];
  readonly dtype: Dtype;
  /** The file, for messages. */
  readonly path: string;
  /**
   * Rows [r0, r0 + count) as row-major, native-order values: a fresh array
   * the caller may keep, or, from a reader opened with `reuse`, a view of one
   * buffer the reader fills again at its next band() call.
   */
  band(r0: number, count: number): FloatArray;
  /** Bytes read from the file so far (header included). */
  readonly bytesRead: number;
  /** Close the file; further reads are refused. Closing twice is harmless. */
  close(): void;
}

/** How the values lie in the file. */
interface Layout {
  shape: [number, number];
  ndShape: number[];
  dtype: Dtype;
  littleEndian: boolean;
  fortranOrder: boolean;
  /** Byte offset of the first value. */
  dataOffset: number;
}

/** Largest single read, so one band never needs one huge buffer beyond its values. */
const MAX_READ = 8 << 20;
/** Fortran-order columns closer than this are fetched by one read. */
const MAX_COLUMN_GAP = 4096;

function fileError(path: string, what: string): InputError {
  return new InputError(InputCode.File, `${path}: ${what}`);
}

/**
 * How a band reader hands out its bands. `reuse`: every band is read into
 * one buffer kept by the reader (grown to the largest band asked for), and
 * band() returns a view of it that is valid until the next band() call: for
 * callers that use each band before asking for the next, as the encoder
 * does (see BandSource in src/codec/tiles.ts). Fresh memory is slow to touch
 * the first time (a page fault per page): reading a 4096 x 4096 float32
 * .npy in fresh 1 MiB buffers ran at 339 MB/s on the bench machine, into one
 * reused buffer at 20 GB/s (issue 10).
 */
export interface BandOptions {
  reuse?: boolean;
}

/** Reads bands of one open file. */
class FileBands implements BandReader {
  bytesRead = 0;
  private fd: number | null;
  /** The buffer bands are read into, with `reuse`. */
  private spare: Uint8Array | null = null;
  private readonly size: number;
  private readonly mtime: number;
  private readonly item: number;

  constructor(
    fd: number,
    readonly path: string,
    private readonly layout: Layout,
    stat: { size: number; mtimeMs: number },
    headerBytes: number,
    private readonly reuse: boolean,
  ) {
    this.fd = fd;
    this.size = stat.size;
    this.mtime = stat.mtimeMs;
    this.item = itemSize(layout.dtype);
    this.bytesRead = headerBytes;
  }

  get ndShape(): number[] {
    return this.layout.ndShape.slice();
  }

  get shape(): [number, number] {
    return this.layout.shape;
  }

  get dtype(): Dtype {
    return this.layout.dtype;
  }

  private handle(): number {
    if (this.fd === null) throw new InputError(InputCode.Option, `${this.path}: read after the band reader was closed`);
    return this.fd;
  }

  /** Refuse to go on when the file is no longer what it was at open. */
  private unchanged(): void {
    const st = fstatSync(this.handle());
    if (st.size !== this.size || st.mtimeMs !== this.mtime) {
      const what = st.size !== this.size ? `its size went from ${this.size} to ${st.size} bytes` : 'it was modified';
      throw fileError(this.path, `the file changed while being read (${what}); pack it once it is complete and no longer written`);
    }
  }

  /** Exactly `length` bytes at `position` into `into` at `at`. */
  private readExact(into: Uint8Array, at: number, length: number, position: number): void {
    const fd = this.handle();
    for (let done = 0; done < length; ) {
      const n = readSync(fd, into, at + done, length - done, position + done);
      if (n === 0) throw fileError(this.path, `the file ended at byte ${position + done}, before the ${this.size} bytes it had when opened (it changed while being read)`);
      done += n;
      this.bytesRead += n;
    }
  }

  band(r0: number, count: number): FloatArray {
    const [rows, cols] = this.layout.shape;
    if (!Number.isSafeInteger(r0) || !Number.isSafeInteger(count) || r0 < 0 || count < 0 || r0 + count > rows) {
      throw new InputError(InputCode.Option, `${this.path}: band of rows ${r0}..${r0 + count} lies outside rows 0..${rows}`);
    }
    this.unchanged();
    const item = this.item;
    const bytes = this.buffer(count * cols * item);
    if (!this.layout.fortranOrder) {
      const start = this.layout.dataOffset + r0 * cols * item;
      for (let at = 0; at < bytes.length; at += MAX_READ) this.readExact(bytes, at, Math.min(MAX_READ, bytes.length - at), start + at);
    } else {
      this.fortranBand(bytes, r0, count);
    }
    this.unchanged();
    if (this.layout.littleEndian !== HOST_LITTLE_ENDIAN) swapBytes(bytes, item);
    return this.layout.dtype === 'f32' ? new Float32Array(bytes.buffer, 0, count * cols) : new Float64Array(bytes.buffer, 0, count * cols);
  }

  /** A band's bytes: the spare buffer's first `length` with `reuse`, else a fresh array. */
  private buffer(length: number): Uint8Array {
    if (!this.reuse) return new Uint8Array(length);
    if (this.spare === null || this.spare.length < length) this.spare = new Uint8Array(length);
    return this.spare.subarray(0, length);
  }

  /**
   * Rows [r0, r0 + count) of Fortran-order (column-major) data: each column
   * holds them as one run; runs of nearby columns are read together, then
   * transposed into row-major order.
   */
  private fortranBand(out: Uint8Array, r0: number, count: number): void {
    const [rows, cols] = this.layout.shape;
    const item = this.item;
    const run = count * item;
    const stride = rows * item;
    const gap = stride - run;
    // Columns per read: all those whose runs lie within MAX_READ, when the gaps between them are small.
    const perRead = gap <= MAX_COLUMN_GAP ? Math.max(1, Math.floor(MAX_READ / stride)) : 1;
    const buf = new Uint8Array(perRead === 1 ? run : (perRead - 1) * stride + run);
    for (let j0 = 0; j0 < cols; j0 += perRead) {
      const k = Math.min(perRead, cols - j0);
      const length = (k - 1) * stride + run;
      this.readExact(buf, 0, length, this.layout.dataOffset + (j0 * rows + r0) * item);
      for (let dj = 0; dj < k; dj++) {
        const src = dj * stride;
        for (let i = 0; i < count; i++) {
          const dst = (i * cols + j0 + dj) * item;
          for (let b = 0; b < item; b++) out[dst + b] = buf[src + i * item + b];
        }
      }
    }
  }

  close(): void {
    const fd = this.fd;
    this.fd = null;
    this.spare = null;
    if (fd !== null) closeSync(fd);
  }
}

/** Open read-only without blocking; a directory is refused with an EISDIR error like Node's own, a FIFO, device or socket with an InputError. */
function openInput(path: string): { fd: number; size: number; mtimeMs: number } {
  const { fd, stat } = openRegularSync(path);
  return { fd, size: stat.size, mtimeMs: stat.mtimeMs };
}

/** Read up to `length` bytes at `position` (fewer at the end of the file). */
function readPrefix(fd: number, length: number, position: number): Uint8Array {
  const out = new Uint8Array(length);
  let done = 0;
  while (done < length) {
    const n = readSync(fd, out, done, length - done, position + done);
    if (n === 0) break;
    done += n;
  }
  return out.subarray(0, done);
}

/** The C-order matrix of an N-D shape: all axes but the last as rows. */
function matrixOf(shape: readonly number[]): [number, number] {
  return [shape.slice(0, -1).reduce((a, b) => a * b, 1), shape[shape.length - 1]];
}

function pyShape(shape: readonly number[]): string {
  return shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
}

/** Largest N-D Fortran-order .npy data read whole to be reordered (2 GiB). */
export const MAX_FORTRAN_BYTES = 2 ** 31;

/**
 * An N-D Fortran-order .npy file, read whole from the open `fd` (which the
 * caller closes) and reordered into C order by {@link parseNpy} (the .npy format
 * description, numpy.lib.format: with fortran_order True the data is the
 * array's column-major order, the first axis varying fastest).
 */
function wholeFortran(fd: number, path: string, size: number, shape: number[], item: number): BandReader {
  const count = checkedProduct(shape, path, pyShape(shape));
  if (count * item > MAX_FORTRAN_BYTES) {
    throw new InputError(InputCode.Shape, `${path}: holds a ${shape.length}-D array of shape ${pyShape(shape)} in Fortran order, which is read whole to reorder it, and its ${count * item} bytes exceed ${MAX_FORTRAN_BYTES}; save it in C order (numpy.ascontiguousarray) to pack it band by band`);
  }
  const bytes = readPrefix(fd, size, 0);
  if (bytes.length !== size) throw fileError(path, `the file ended at byte ${bytes.length}, before the ${size} bytes it had when opened (it changed while being read)`);
  const arr = parseNpy(bytes, path);
  return new ArrayBands(path, arr.data, shape, size);
}

/** Bands of an array already in memory, in C order. */
class ArrayBands implements BandReader {
  private data: FloatArray | null;
  readonly shape: [number, number];
  readonly dtype: Dtype;

  constructor(
    readonly path: string,
    data: FloatArray,
    private readonly nd: number[],
    readonly bytesRead: number,
  ) {
    this.data = data;
    this.shape = matrixOf(nd);
    this.dtype = data instanceof Float32Array ? 'f32' : 'f64';
  }

  get ndShape(): number[] {
    return this.nd.slice();
  }

  band(r0: number, count: number): FloatArray {
    const [rows, cols] = this.shape;
    if (this.data === null) throw new InputError(InputCode.Option, `${this.path}: read after the band reader was closed`);
    if (!Number.isSafeInteger(r0) || !Number.isSafeInteger(count) || r0 < 0 || count < 0 || r0 + count > rows) {
      throw new InputError(InputCode.Option, `${this.path}: band of rows ${r0}..${r0 + count} lies outside rows 0..${rows}`);
    }
    // A copy, as a file read gives: the caller may keep or change it.
    return this.data.slice(r0 * cols, (r0 + count) * cols);
  }

  close(): void {
    this.data = null;
  }
}

/**
 * Open a .npy file holding a float32 or float64 array of 2 or more axes
 * (N-D ones in C order) for band reads. Only its header is read here.
 * An N-D array (3 or more axes) in Fortran order, whose C-order rows are
 * scattered over the whole file, is read whole and reordered into C order
 * in memory ({@link MAX_FORTRAN_BYTES} at most); a 2-D one is read by bands.
 * Throws InputError for what `parseNpyHeader` refuses, for 1-D and empty
 * arrays, and for a
 * data part whose length differs from what the header declares; system
 * errors (ENOENT, EACCES, EISDIR) pass on as Node reports them.
 */
export function openNpyBands(path: string, options: BandOptions = {}): BandReader {
  const { fd, size, mtimeMs } = openInput(path);
  try {
    // The header's length sits in bytes 8..12; read just enough for the whole header.
    const lead = readPrefix(fd, 12, 0);
    let want = lead.length;
    if (lead.length >= 10 && lead[6] === 1) want = 10 + (lead[8] | (lead[9] << 8));
    else if (lead.length >= 12 && (lead[6] === 2 || lead[6] === 3)) want = 12 + new DataView(lead.buffer, lead.byteOffset, 12).getUint32(8, true);
    const head = want <= lead.length ? lead : readPrefix(fd, Math.min(want, 12 + MAX_NPY_HEADER_BYTES + 1), 0);
    const h = parseNpyHeader(head, path);
    if (h.shape.length < 2) {
      throw new InputError(InputCode.Shape, `${path}: holds a ${h.shape.length}-D array of shape ${pyShape(h.shape)}; a field has 2 or more axes`);
    }
    if (h.shape.some((d) => d === 0)) throw new InputError(InputCode.Shape, `${path}: the array of shape ${pyShape(h.shape)} holds no values`);
    const count = checkedProduct(h.shape, path, pyShape(h.shape));
    const item = itemSize(h.dtype);
    const available = size - h.dataOffset;
    if (available !== count * item) {
      throw fileError(
        path,
        `header declares shape ${pyShape(h.shape)} = ${count} values of ${item} bytes but the data holds ${available} bytes` +
          (available < count * item ? ' (file truncated?)' : ` (${available - count * item} extra bytes)`),
      );
    }
    if (h.shape.length > 2 && h.fortranOrder) {
      const whole = wholeFortran(fd, path, size, h.shape, item);
      closeSync(fd);
      return whole;
    }
    const layout: Layout = { shape: matrixOf(h.shape), ndShape: h.shape.slice(), dtype: h.dtype, littleEndian: h.littleEndian, fortranOrder: h.fortranOrder, dataOffset: h.dataOffset };
    return new FileBands(fd, path, layout, { size, mtimeMs }, head.length, options.reuse === true);
  } catch (e) {
    closeSync(fd);
    throw e;
  }
}

/**
 * Open a headerless raw file of `shape` (rows, cols) values of `dtype` in C
 * order and the given byte order for band reads. Its size must be exactly
 * rows x cols x item size (else InputError Shape).
 */
export function openRawBands(path: string, shape: readonly number[], dtype: Dtype, endian: 'little' | 'big', options: BandOptions = {}): BandReader {
  if (dtype !== 'f32' && dtype !== 'f64') throw new InputError(InputCode.Dtype, `${path}: unknown dtype ${JSON.stringify(dtype)}, expected 'f32' or 'f64'`);
  if (endian !== 'little' && endian !== 'big') throw new InputError(InputCode.Option, `${path}: byte order must be 'little' or 'big', not ${JSON.stringify(endian)}`);
  if (!shape.every((d) => Number.isSafeInteger(d) && d >= 1) || shape.length < 2) {
    throw new InputError(InputCode.Shape, `${path}: shape must be two or more positive integers, got ${JSON.stringify(shape)}`);
  }
  const { fd, size, mtimeMs } = openInput(path);
  try {
    const count = checkedProduct(shape, path, shape.join('x'));
    const item = itemSize(dtype);
    if (size !== count * item) {
      throw new InputError(
        InputCode.Shape,
        `${path}: shape ${shape.join('x')} of ${dtype} needs ${count} values of ${item} bytes = ${count * item} bytes but the file holds ${size} bytes`,
      );
    }
    const layout: Layout = { shape: matrixOf(shape), ndShape: shape.slice(), dtype, littleEndian: endian === 'little', fortranOrder: false, dataOffset: 0 };
    return new FileBands(fd, path, layout, { size, mtimeMs }, 0, options.reuse === true);
  } catch (e) {
    closeSync(fd);
    throw e;
  }
}

/**
 * The bytes of `values` in the given byte order: a view of them, with no
 * copy, when that is the host's order; else a byte-swapped copy.
 */
export function valueBytes(values: FloatArray, endian: 'little' | 'big'): Uint8Array {
  const bytes = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
  if ((endian === 'little') === HOST_LITTLE_ENDIAN) return bytes;
  const copy = bytes.slice();
  swapBytes(copy, values.BYTES_PER_ELEMENT);
  return copy;
}

/**
 * Writes a .npy file (little-endian, C order) band by band: the header
 * first, then rows in order. {@link NpyBandWriter.close} checks that every
 * row was written, flushes and closes.
 */
export class NpyBandWriter {
  private fd: number | null;
  private rowsWritten = 0;
  private readonly cols: number;

  /** Create `path` (refusing an existing file) for a field of `shape` and `dtype`. */
  constructor(
    readonly path: string,
    readonly shape: [number, number],
    readonly dtype: Dtype,
  ) {
    this.cols = shape[1];
    const out = npyHeader(shape, dtype);
    this.fd = openSync(path, 'wx', 0o644);
    this.put(out);
  }

  private put(bytes: Uint8Array): void {
    if (this.fd === null) throw new InputError(InputCode.Option, `${this.path}: write after close`);
    for (let at = 0; at < bytes.length; ) at += writeSync(this.fd, bytes, at, bytes.length - at);
  }

  /** Append the next rows (a whole number of rows of the field's dtype). */
  write(band: FloatArray): void {
    const want = this.dtype === 'f32' ? Float32Array : Float64Array;
    if (!(band instanceof want) || band.length % this.cols !== 0) {
      throw new InputError(InputCode.Shape, `${this.path}: a band must be whole rows of ${this.cols} ${this.dtype} values`);
    }
    const rows = band.length / this.cols;
    if (this.rowsWritten + rows > this.shape[0]) throw new InputError(InputCode.Shape, `${this.path}: more than the ${this.shape[0]} rows declared`);
    this.put(valueBytes(band, 'little'));
    this.rowsWritten += rows;
  }

  /** Check that all rows were written, flush and close. */
  close(): void {
    const fd = this.fd;
    if (fd === null) return;
    this.fd = null;
    try {
      if (this.rowsWritten !== this.shape[0]) throw new InputError(InputCode.Shape, `${this.path}: ${this.rowsWritten} of ${this.shape[0]} rows written`);
      fsyncSync(fd);
    } finally {
      closeSync(fd);
    }
  }
}
