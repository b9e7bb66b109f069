/** Opening a NetCDF input on the command line: classic and 64-bit-offset files, or NetCDF-4 / HDF5 through h5wasm. */
import { openNetcdf4Input } from '../io/hdf5-read.js';
import { openClassicInput, type NetcdfInput } from '../io/netcdf-input.js';
import { fileError } from './errors.js';
import { emptyFile } from './files.js';

/**
 * Open `path` for reading its variables a band at a time (only the header
 * is read here): NetCDF-4 / HDF5 when `hdf5`, else classic. File system
 * errors are phrased with the path; an empty file is refused as such. The
 * caller closes it.
 */
export async function openNetcdfInput(path: string, hdf5: boolean): Promise<NetcdfInput> {
  try {
    if (hdf5) return await openNetcdf4Input(path);
    const nc = openClassicInput(path);
    return nc;
  } catch (e) {
    if (e instanceof Error && /: the file is empty, not a NetCDF file$/.test(e.message)) throw emptyFile(path);
    throw fileError(e, 'read', path);
  }
}
