/**
 * A NetCDF file open for reading its variables a band at a time: a classic
 * or 64-bit-offset file read with positioned reads (src/io/netcdf-file.ts)
 * or held in memory, or a NetCDF-4 / HDF5 file read through h5wasm by
 * hyperslabs (src/io/hdf5-read.ts). Either way its header is the classic
 * model ({@link NcFile}) and a variable's values come as
 * {@link readNetcdfVariable} gives them, so a variable larger than memory is
 * packed, checked or sampled from bands of rows.
 */
import { NcFileBytes } from './netcdf-file.js';
import { bytesSource, classicStored, NcVariableReader, readNetcdfHeader, type NcBytes, type NcFile, type NcVariable, type StoredReader } from './netcdf-read.js';
import { NC_TYPE_SIZE } from './netcdf-types.js';

/** The stored values of a variable, bit for bit (float types as their bits: NaN payloads survive). */
export type StoredBits = Int8Array | Uint8Array | Int16Array | Int32Array | Float32Array | Float64Array;

/** A NetCDF file open for reading. */
export interface NetcdfInput {
  /** The file, for messages. */
  readonly path: string;
  /** The header, in the classic model. */
  readonly file: NcFile;
  /** Reads a variable's stored values (see {@link StoredReader}). */
  readonly stored: StoredReader;
  /** Bytes read from the file so far (classic files; 0 for NetCDF-4, whose reads HDF5 makes). */
  readonly bytesRead: number;
  /** The stored values of a whole variable, bit for bit (for the variables carried losslessly: coordinates, text). */
  storedBits(v: NcVariable): StoredBits;
  /** A variable of 2 or more dimensions read a band at a time (refusals as {@link readNetcdfVariable}'s). */
  variable(name: string, options?: { mark?: boolean }): NcVariableReader;
  /** Release the file. Closing twice is harmless. */
  close(): void;
}

/** Stored values of a whole variable of a classic file, bit for bit (big-endian on disk; typed arrays hold the same bits). */
export function classicBits(src: NcBytes, file: NcFile, v: NcVariable): StoredBits {
  const size = NC_TYPE_SIZE[v.type];
  const slab = (v.isRecord ? v.shape.slice(1) : v.shape).reduce((a, b) => a * b, 1);
  const records = v.isRecord ? v.shape[0] : 1;
  const n = slab * records;
  // Floats are read as their bit patterns, so NaN payloads survive.
  const out =
    v.type === 'byte' ? new Int8Array(n) : v.type === 'char' ? new Uint8Array(n) : v.type === 'short' ? new Int16Array(n) : v.type === 'int' ? new Int32Array(n) : v.type === 'float' ? new Uint32Array(n) : new BigUint64Array(n);
  for (let r = 0; r < records; r++) {
    if (slab === 0) break;
    const bytes = src.read(v.begin + r * file.recordSize, slab * size);
    const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
    const at = r * slab;
    for (let i = 0; i < slab; i++) {
      const off = i * size;
      if (out instanceof Int8Array) out[at + i] = view.getInt8(off);
      else if (out instanceof Uint8Array) out[at + i] = view.getUint8(off);
      else if (out instanceof Int16Array) out[at + i] = view.getInt16(off);
      else if (out instanceof Int32Array) out[at + i] = view.getInt32(off);
      else if (out instanceof Uint32Array) out[at + i] = view.getUint32(off);
      else out[at + i] = view.getBigUint64(off);
    }
  }
  if (out instanceof Uint32Array) return new Float32Array(out.buffer);
  if (out instanceof BigUint64Array) return new Float64Array(out.buffer);
  return out;
}

/** A classic or 64-bit-offset file over its bytes: in memory, or a file read with positioned reads. */
class ClassicInput implements NetcdfInput {
  readonly file: NcFile;
  readonly stored: StoredReader;

  constructor(
    readonly path: string,
    private readonly src: NcBytes & { bytesRead?: number; close?: () => void },
  ) {
    this.file = readNetcdfHeader(src, path);
    this.stored = classicStored(src, this.file);
  }

  get bytesRead(): number {
    return this.src.bytesRead ?? 0;
  }

  storedBits(v: NcVariable): StoredBits {
    return classicBits(this.src, this.file, v);
  }

  variable(name: string, options: { mark?: boolean } = {}): NcVariableReader {
    return new NcVariableReader(this.stored, this.file, name, options);
  }

  close(): void {
    this.src.close?.();
  }
}

/** A classic or 64-bit-offset NetCDF file held in memory. */
export function classicInput(bytes: Uint8Array, path: string): NetcdfInput {
  return new ClassicInput(path, bytesSource(bytes));
}

/**
 * Open a classic or 64-bit-offset NetCDF file for band reads: only its
 * header is read here. Refusals as {@link readNetcdfHeader}'s; file system
 * errors pass on as Node reports them. The caller closes it.
 */
export function openClassicInput(path: string): NetcdfInput {
  const src = NcFileBytes.open(path);
  try {
    return new ClassicInput(path, src);
  } catch (e) {
    src.close();
    throw e;
  }
}
