/**
 * How the command line names fields and output files: small helpers kept
 * apart from the NetCDF code (src/cli/netcdf.ts re-exports them), so that a
 * command that only needs a name does not load the NetCDF and packing code.
 */

/**
 * A field or variable named as the user gave it: a NetCDF-4 path such as
 * '/ocean/temp' names the field 'ocean/temp' (and '/temp' the root group's
 * 'temp'), since names keep group paths without the leading '/' (spec/FORMAT.md,
 * section 6.4.1). A name that is one of `names` as given, or names none of
 * them either way, is kept (so a refusal quotes it as given).
 */
export function byPath(names: readonly string[], name: string): string;
export function byPath(names: readonly string[], name: string | undefined): string | undefined;
export function byPath(names: readonly string[], name: string | undefined): string | undefined {
  if (name === undefined || names.includes(name) || !name.startsWith('/')) return name;
  const path = name.replace(/^\/+/, '');
  return names.includes(path) ? path : name;
}

/** True when a path names a NetCDF file (case-insensitive extension .nc). */
export function isNetcdfPath(path: string): boolean {
  return /\.nc$/i.test(path);
}
