/**
 * Missing values beside the fill value, for archives packed from NetCDF
 * variables that declare a `missing_value` other than their `_FillValue`
 * (CF conventions 1.x section 2.5.1, "Missing data", from memory): a field
 * has one fill value, so the cells of each other missing value are stored
 * as a quiet NaN with a payload of our own (the k-th such value as the k-th
 * mark, see src/io/netcdf-types.ts), and the values themselves are listed in
 * the field attribute {@link MISSING_VALUES_KEY} (spec/FORMAT.md, section
 * 6.4.1). A read ({@link Archive.read}, readBands) returns those marks, bit
 * for bit as stored; {@link restoreMissing} puts the values back, as the
 * command line does for .npy, raw and CSV output (.nc output writes them in
 * the variable's stored type).
 */
import type { FieldHeader } from './format/schema.js';
import { unmark } from './io/netcdf-types.js';
import type { FloatArray } from './types.js';

/** The field attribute listing the physical value of each missing value beside the fill, in mark order. */
export const MISSING_VALUES_KEY = 'rankfield:nc_missing';

/**
 * The other missing values of a field (see the module comment), in mark
 * order; empty when the field records none, or records them as anything but
 * a list of numbers (readers may ignore the attribute).
 */
export function missingValues(field: FieldHeader): number[] {
  const marks = field.attrs[MISSING_VALUES_KEY];
  return Array.isArray(marks) && marks.length > 0 && marks.every((x) => typeof x === 'number') ? (marks as number[]) : [];
}

/**
 * Put a field's other missing values back in values read from it (a whole
 * field or any window, in place): each cell holding the k-th mark gets the
 * k-th value of {@link missingValues}, bit for bit as the source held it.
 * Other cells, NaN cells among them, are left as they are. Returns `values`.
 */
export function restoreMissing<T extends FloatArray>(field: FieldHeader, values: T): T {
  const marks = missingValues(field);
  if (marks.length > 0) unmark(values, marks);
  return values;
}
