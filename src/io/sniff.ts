/**
 * Telling a file's format from its first bytes, so that inputs are read by
 * what they are rather than by their names:
 *  - .npy: "\x93NUMPY" (NumPy's NEP 1, "A simple file format for NumPy arrays", from memory);
 *  - NetCDF classic "CDF\x01", 64-bit offset "CDF\x02", CDF-5 "CDF\x05"
 *    (NetCDF Users Guide, "File Format Specification", from memory);
 *  - HDF5, and so NetCDF-4: "\x89HDF\r\n\x1a\n" at offset 0, 512, 1024,
 *    2048, ... (HDF5 File Format Specification, section "Format Signature
 *    and Superblock", from memory; a user block may come first);
 *  - a rankfield archive: its own magic (spec/FORMAT.md).
 */
import { MAGIC } from '../format/container.js';

/** What a file's first bytes say it is; null when they match none. */
export type SniffedFormat = 'npy' | 'netcdf-classic' | 'netcdf-64bit' | 'netcdf-cdf5' | 'hdf5' | 'rankfield';

/** How many leading bytes {@link sniffFormat} looks at (HDF5 signatures up to offset 4096). */
export const SNIFF_BYTES = 4096 + 8;

const HDF5 = [0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a];
const NPY = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59];

function at(head: Uint8Array, offset: number, magic: ArrayLike<number>): boolean {
  if (offset + magic.length > head.length) return false;
  for (let i = 0; i < magic.length; i++) if (head[offset + i] !== magic[i]) return false;
  return true;
}

/** The format of a file whose first bytes (up to {@link SNIFF_BYTES}) are `head`. */
export function sniffFormat(head: Uint8Array): SniffedFormat | null {
  if (at(head, 0, NPY)) return 'npy';
  if (at(head, 0, [0x43, 0x44, 0x46])) {
    if (head[3] === 1) return 'netcdf-classic';
    if (head[3] === 2) return 'netcdf-64bit';
    if (head[3] === 5) return 'netcdf-cdf5';
  }
  for (let o = 0; o + HDF5.length <= head.length; o = o === 0 ? 512 : o * 2) if (at(head, o, HDF5)) return 'hdf5';
  if (at(head, 0, MAGIC)) return 'rankfield';
  return null;
}
