/**
 * Writing a field back to NetCDF as the variable it was read from: in its
 * stored type (byte, short, int, or float/double), with its own attributes
 * (scale_factor, add_offset, _FillValue, missing_value, _Unsigned, valid_*),
 * following CF conventions 1.x section 8.1 "Packed data" and section 2.5.1
 * "Missing data" (from memory): stored = (physical - add_offset) /
 * scale_factor, rounded to the nearest integer for integer types; every
 * missing value as it was declared.
 *
 * The archive holds physical values within the bound; rounding to the
 * stored step adds at most half a step (scale_factor / 2, or 0.5 for plain
 * integers). A valid value that would round onto a declared missing value
 * is moved one step towards its decoded value, so it stays valid.
 */
import type { FloatArray } from '../index.js';
import { markAt, NC_DEFAULT_FILL, NC_INT_RANGE, type NcAttrs, type NcType } from '../io/netcdf-types.js';
import type { NcWriteValues } from '../io/netcdf-write.js';

/** The first number of an attribute value, or undefined. */
function first(a: NcAttrs[string] | undefined): number | undefined {
  const x = Array.isArray(a) ? a[0] : a;
  return typeof x === 'number' && Number.isFinite(x) ? x : undefined;
}

/** The declared missing values as stored in the attributes, in the reader's order: _FillValue, then each missing_value (NaN and repeats dropped); else the default fill. */
export function declaredMissing(attrs: NcAttrs, type: NcType): number[] {
  const out: number[] = [];
  const add = (x: unknown) => {
    if (typeof x === 'number' && !Number.isNaN(x) && !out.includes(x)) out.push(x);
  };
  const fv = attrs._FillValue;
  const mv = attrs.missing_value;
  add(Array.isArray(fv) ? fv[0] : fv);
  for (const x of Array.isArray(mv) ? mv : [mv]) add(x);
  if (fv === undefined && mv === undefined && type !== 'byte') add(NC_DEFAULT_FILL[type]);
  return out;
}

/**
 * The values of a field in the variable's stored type: cells equal to the
 * field's `fill` get the first declared missing value, cells holding
 * missing-value mark k (see netcdf-types.ts) the (k+1)-th, others are
 * packed and rounded as the module comment says.
 */
export function toStoredType(values: FloatArray, fill: number | null, type: NcType, attrs: NcAttrs): NcWriteValues {
  const missing = declaredMissing(attrs, type);
  const marks = Math.max(0, missing.length - 1);
  const packed = attrs.scale_factor !== undefined || attrs.add_offset !== undefined;
  const scale = first(attrs.scale_factor) ?? 1;
  const offset = first(attrs.add_offset) ?? 0;
  const f = fill === null ? null : values instanceof Float32Array ? Math.fround(fill) : fill;
  const n = values.length;
  if (type === 'float' || type === 'double') {
    const out = type === 'float' ? new Float32Array(n) : new Float64Array(n);
    const same = !packed && (type === 'float') === values instanceof Float32Array;
    if (same) out.set(values); // a typed-array copy: NaN payloads kept
    for (let i = 0; i < n; i++) {
      const x = values[i];
      const k = marks > 0 ? markAt(values, i, marks) : 0;
      if (k > 0) out[i] = missing[k];
      else if (f !== null && x === f) out[i] = missing.length > 0 ? missing[0] : x;
      else if (!same) out[i] = packed ? (x - offset) / scale : x;
    }
    return out;
  }
  const unsigned = String(attrs._Unsigned ?? '').toLowerCase() === 'true';
  const bits = type === 'byte' ? 8 : type === 'short' ? 16 : 32;
  const [lo, hi] = unsigned ? [0, 2 ** bits - 1] : NC_INT_RANGE[type as 'byte' | 'short' | 'int'];
  const signed = (s: number) => (unsigned && s > NC_INT_RANGE[type as 'byte' | 'short' | 'int'][1] ? s - 2 ** bits : s);
  const storedFill = missing.length > 0 ? missing[0] : NC_DEFAULT_FILL[type];
  const out = new Array<number>(n);
  for (let i = 0; i < n; i++) {
    const x = values[i];
    const k = marks > 0 ? markAt(values, i, marks) : 0;
    if (k > 0) out[i] = missing[k];
    else if ((f !== null && x === f) || Number.isNaN(x)) out[i] = storedFill;
    else {
      const raw = packed ? (x - offset) / scale : x;
      let s = Math.min(hi, Math.max(lo, Math.round(raw)));
      if (missing.includes(signed(s))) s = Math.min(hi, Math.max(lo, raw > s ? s + 1 : s - 1));
      out[i] = signed(s);
    }
  }
  return out;
}
