/**
 * Files made by the standard tools for the file-format tests: CDL text (the
 * netCDF text notation, NetCDF Users Guide "CDL Syntax", from memory) turned
 * into NetCDF classic, 64-bit-offset or NetCDF-4 files by Debian's
 * netcdf-bin `ncgen`, and converted by `nccopy`. Present only where
 * netcdf-bin is installed (see system-tools.ts).
 */
import { execFileSync } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import { haveSystemTools } from './system-tools.js';

export const NCGEN = '/usr/bin/ncgen';
export const NCCOPY = '/usr/bin/nccopy';
export const NCDUMP = '/usr/bin/ncdump';

/** Whether tests needing netcdf-bin run (see {@link haveSystemTools}). */
export function haveNetcdfBin(what: string): boolean {
  return haveSystemTools(what, 'netcdf-bin', [NCGEN, NCCOPY, NCDUMP]);
}

/** ncgen's -k: classic (CDF-1), 64-bit offset (CDF-2), NetCDF-4 (HDF5 inside), NetCDF-4 classic model. */
export type NcKind = 'nc3' | 'nc6' | 'nc4' | 'nc7';

/** Write `cdl` beside `out` and make `out` from it with ncgen. */
export function ncgen(cdl: string, out: string, kind: NcKind = 'nc3'): string {
  writeFileSync(`${out}.cdl`, cdl);
  execFileSync(NCGEN, ['-k', kind, '-o', out, `${out}.cdl`], { stdio: ['ignore', 'ignore', 'pipe'] });
  return out;
}

/** Numbers as CDL data: comma-separated, NaN as NaN, float32 values with enough digits. */
export function cdlValues(values: ArrayLike<number>): string {
  const out: string[] = [];
  for (let i = 0; i < values.length; i++) out.push(Number.isNaN(values[i]) ? 'NaN' : String(values[i]));
  return out.join(', ');
}

/** `ncdump -h` of a file: its header in CDL. */
export function ncdumpHeader(path: string): string {
  return execFileSync(NCDUMP, ['-h', path], { encoding: 'utf8' });
}
