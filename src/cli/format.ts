/** Number and table formatting for the command line's reports. */
import { formatBound, isPointwise } from '../codec/bound.js';
import type { FieldHeader } from '../format/schema.js';
import { NC_TYPE_SIZE, type NcType } from '../io/netcdf-types.js';

/** A number in 4 significant digits, exponent form when very large or small. */
export function num(x: number): string {
  if (!Number.isFinite(x)) return String(x);
  if (x === 0) return '0';
  const a = Math.abs(x);
  if (a >= 1e-3 && a < 1e7) return String(Number(x.toPrecision(4)));
  return x.toExponential(3).replace(/\.?0+e/, 'e');
}

/** A byte count for people: "512 bytes", "12.3 kB", "4.56 MB" (SI units, 3 significant digits). */
export function bytesText(n: number): string {
  if (n < 1000) return `${n} bytes`;
  const units = ['kB', 'MB', 'GB', 'TB', 'PB'];
  let v = n / 1000;
  let u = 0;
  while (v >= 999.5 && u < units.length - 1) {
    v /= 1000;
    u++;
  }
  return `${Number(v.toPrecision(3))} ${units[u]}`;
}

/** A compression ratio, e.g. "12.34". */
export function ratio(raw: number, packed: number): string {
  return packed > 0 ? (raw / packed).toFixed(2) : '-';
}

/** Seconds from milliseconds, e.g. "1.23 s" or "45 ms". */
export function seconds(ms: number): string {
  return ms < 1000 ? `${Math.round(ms)} ms` : `${(ms / 1000).toFixed(2)} s`;
}

/** Bytes of the values of a field as stored raw, in its dtype. */
export function rawBytes(h: FieldHeader): number {
  return (h.slices ?? 1) * h.shape[0] * h.shape[1] * (h.dtype === 'f32' ? 4 : 8);
}

/**
 * Bytes of the values of a field as its source stored them: {@link rawBytes},
 * or for a NetCDF variable in its stored type (attribute rankfield:nc_type,
 * spec/FORMAT.md section 6.4.1), so a short variable unpacked to float64
 * counts 2 bytes a value, as pack reports it.
 */
export function sourceBytes(h: FieldHeader): number {
  const stored = h.attrs['rankfield:nc_type'];
  if (typeof stored !== 'string' || stored === 'char' || !Object.hasOwn(NC_TYPE_SIZE, stored)) return rawBytes(h);
  return (h.slices ?? 1) * h.shape[0] * h.shape[1] * NC_TYPE_SIZE[stored as NcType];
}

/**
 * The error a bound limits, measured against its resolved tolerance E:
 * the max error for pointwise modes, the RMSE for the others.
 */
export function errorVsBound(h: FieldHeader, maxErr: number, rmse: number): { what: 'max error' | 'RMSE'; value: number; fraction: number } {
  const pointwise = isPointwise(h.bound.mode);
  const value = pointwise ? maxErr : rmse;
  const tol = h.bound.tolerance;
  return { what: pointwise ? 'max error' : 'RMSE', value, fraction: tol > 0 ? value / tol : value === 0 ? 0 : Infinity };
}

/** "rel:0.001 (E = 0.0301, pointwise)" */
export function boundText(h: FieldHeader): string {
  const kind = isPointwise(h.bound.mode) ? 'pointwise limit' : 'RMSE limit';
  return `${formatBound(h.bound)} (${kind} E = ${num(h.bound.tolerance)})`;
}

/** Render rows as a table with columns padded to width; numbers right-aligned. */
export function table(head: string[], rows: string[][]): string {
  const widths = head.map((h, c) => Math.max(h.length, ...rows.map((r) => r[c].length)));
  const right = head.map((_, c) => rows.every((r) => /^[-+0-9.e]+( ms| s)?$/.test(r[c])));
  const line = (cells: string[]) =>
    cells
      .map((s, c) => (right[c] ? s.padStart(widths[c]) : s.padEnd(widths[c])))
      .join('  ')
      .trimEnd();
  return [line(head), line(widths.map((w) => '-'.repeat(w))), ...rows.map(line)].join('\n');
}
