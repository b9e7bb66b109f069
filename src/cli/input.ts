/**
 * Reading a 2-D field from a file named on the command line: a .npy file
 * (its own header says shape and dtype), or else headerless raw binary whose
 * shape, dtype and byte order the user states.
 */
import { InputError } from '../errors.js';
import type { Dtype, FloatArray } from '../types.js';
import { openNpyBands, openRawBands, type BandOptions, type BandReader } from '../io/bands.js';
import { openRegular } from '../io/regular-file.js';
import { SNIFF_BYTES, sniffFormat } from '../io/sniff.js';
import { fileError, UsageError } from './errors.js';

/** How a raw file is laid out, as given by --shape, --dtype and --endian. */
export interface RawLayout {
  shape?: number[];
  dtype?: Dtype;
  endian?: 'little' | 'big';
}

/** True when a path names a .npy file (case-insensitive extension). */
export function isNpyPath(path: string): boolean {
  return /\.npy$/i.test(path);
}

/** How an input file is read: by its first bytes, else by its name (see {@link inputKind}). */
export type InputKind = 'npy' | 'netcdf' | 'hdf5' | 'raw';

/**
 * How to read `path`: by what its first bytes say (src/io/sniff.ts), so
 * that a NetCDF file named .cdf or a .npy file named .dat is read as what it
 * is; when they say nothing, by its extension (.npy; .nc, .cdf, .nc4, .h5,
 * .hdf5 are read as NetCDF, whose reader says what is wrong); else raw. A
 * rankfield archive is refused (it is not a field).
 */
export async function inputKind(path: string): Promise<InputKind> {
  let head: Uint8Array;
  try {
    head = await readHead(path, SNIFF_BYTES);
  } catch (e) {
    throw fileError(e, 'read', path);
  }
  const f = sniffFormat(head);
  if (f === 'npy') return 'npy';
  if (f === 'hdf5') return 'hdf5';
  if (f !== null && f.startsWith('netcdf')) return 'netcdf';
  if (f === 'rankfield') throw new UsageError(`'${path}' is a rankfield archive, not a field (unpack it first, or name the original)`);
  if (isNpyPath(path)) return 'npy';
  if (/\.(nc|cdf|nc4|h5|hdf5?)$/i.test(path)) return 'netcdf';
  return 'raw';
}

const NPY_MAGIC = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59];

/**
 * Check, before any file is read, that the layout options fit the input:
 * none for a .npy file (it describes itself); --shape and --dtype (or
 * `defaults`) for raw input. Returns the raw layout, or null for .npy.
 */
export function checkLayout(
  path: string,
  given: RawLayout,
  defaults?: { shape: number[]; dtype: Dtype },
  kind: InputKind = isNpyPath(path) ? 'npy' : 'raw',
): { shape: number[]; dtype: Dtype; endian: 'little' | 'big' } | null {
  if (kind === 'npy') {
    const used = (['shape', 'dtype', 'endian'] as const).filter((k) => given[k] !== undefined).map((k) => `--${k}`);
    if (used.length > 0) {
      throw new UsageError(`${used.join(', ')} describe headerless raw input, but '${path}' is a .npy file that carries its own header; drop ${used.length > 1 ? 'them' : 'it'}`);
    }
    return null;
  }
  const shape = given.shape ?? defaults?.shape;
  const dtype = given.dtype ?? defaults?.dtype;
  if (shape === undefined || dtype === undefined) {
    const missing = [shape === undefined ? '--shape RxC' : '', dtype === undefined ? '--dtype f32|f64' : ''].filter(Boolean).join(' and ');
    throw new UsageError(`'${path}' is neither .npy nor NetCDF by its first bytes or its name, so it is read as headerless raw binary, which needs ${missing}`);
  }
  return { shape, dtype, endian: given.endian ?? 'little' };
}

/**
 * Open `path` for reading a band of rows at a time (only the .npy header is
 * read here): a .npy file by its header, else raw input by the layout
 * options (for which `defaults` stand in for a missing --shape or --dtype),
 * with the raw reader's message noting a file that starts like .npy. The
 * caller closes the reader. File system errors are phrased with the path.
 */
export async function openFieldBands(path: string, given: RawLayout, kind?: InputKind, defaults?: { shape: number[]; dtype: Dtype }, options: BandOptions = {}): Promise<BandReader> {
  const layout = checkLayout(path, given, defaults, kind);
  try {
    if (layout === null) return openNpyBands(path, options);
    try {
      return openRawBands(path, layout.shape, layout.dtype, layout.endian, options);
    } catch (e) {
      if (e instanceof InputError) {
        const head = await readHead(path, NPY_MAGIC.length);
        if (NPY_MAGIC.every((b, i) => head[i] === b)) {
          throw new InputError(e.code, `${e.message} (the file starts like a .npy file; give it a .npy name to read its header)`);
        }
      }
      throw e;
    }
  } catch (e) {
    throw fileError(e, 'read', path);
  }
}

/** The first bytes of a file (for telling what it looks like). */
async function readHead(path: string, bytes: number): Promise<Uint8Array> {
  const { handle: h } = await openRegular(path);
  try {
    const out = new Uint8Array(bytes);
    const { bytesRead } = await h.read(out, 0, out.length, 0);
    return out.subarray(0, bytesRead);
  } finally {
    await h.close();
  }
}

/**
 * C-order values [start, start + count) of a field read by bands: the rows
 * of the reader's matrix that hold them are read, and the run cut out.
 */
export function flatValues(field: BandReader, start: number, count: number): FloatArray {
  const cols = field.shape[1];
  const r0 = Math.floor(start / cols);
  const r1 = Math.ceil((start + count) / cols);
  const rows = field.band(r0, r1 - r0);
  const at = start - r0 * cols;
  return at === 0 && rows.length === count ? rows : rows.slice(at, at + count);
}
