/**
 * Windows of N-D fields by axis, whatever the field's layout: per-axis
 * index ranges from --slices / --region (over the variable's own axes) or
 * from --where NAME=LO:HI (coordinate ranges, through the coordinate
 * variables a NetCDF archive carries), and the reading of such a window from
 * a field laid out as slices or as a matrix. Dimension names match without
 * regard to case; a name that matches none is refused with the real names.
 */
import { InvalidArgumentError } from 'commander';
import type { Archive, FieldHeader, FloatArray } from '../index.js';
import { printable } from '../format/schema.js';
import { ndShape } from '../geometry.js';
import { UsageError } from './errors.js';

/** A window as given by --region: each end may be left open (to the field's edge). */
export interface Region {
  rows: [number | undefined, number | undefined];
  cols: [number | undefined, number | undefined];
}

/** A half-open range whose ends may be left open (to the edge). */
export type Span = [number | undefined, number | undefined];

/** A half-open index range along one axis. */
export type AxisRange = [number, number];

/** One --where term: NAME=LO:HI, either end open. */
export interface WhereTerm {
  name: string;
  lo: number;
  hi: number;
}

const NUMBER = /^[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$/;

/** `--where NAME=LO:HI[,NAME=LO:HI...]`: coordinate ranges, inclusive, an empty end open. */
export function whereOption(text: string): WhereTerm[] {
  const terms = text.split(',').map((t) => t.trim());
  return terms.map((t) => {
    const m = /^([^=]+)=([^:]*):([^:]*)$/.exec(t);
    const ends = m ? [m[2].trim(), m[3].trim()] : [];
    if (!m || !ends.every((e) => e === '' || NUMBER.test(e))) {
      throw new InvalidArgumentError(`where must be NAME=LO:HI terms separated by commas, LO and HI coordinate values (inclusive; an empty end is open), e.g. lat=-30:30,lon=100:180; got '${text}'`);
    }
    const lo = ends[0] === '' ? -Infinity : Number(ends[0]);
    const hi = ends[1] === '' ? Infinity : Number(ends[1]);
    if (lo > hi) throw new InvalidArgumentError(`where ${m[1].trim()}=${ends[0]}:${ends[1]} is empty (LO must not exceed HI)`);
    return { name: m[1].trim(), lo, hi };
  });
}

/** The field's dimension names, one per axis of {@link ndShape}. */
export function dimNames(h: FieldHeader): string[] {
  const nd = ndShape(h);
  return h.dims && h.dims.length === nd.length ? h.dims : nd.map((_, i) => `${h.name}_dim${i}`);
}

/** The axis of dimension `name` (any case), or a refusal listing the field's real names. */
export function axisOf(h: FieldHeader, name: string): number {
  const dims = dimNames(h);
  const exact = dims.indexOf(name);
  if (exact >= 0) return exact;
  let i = dims.findIndex((d) => d.toLowerCase() === name.toLowerCase());
  // A dimension of a NetCDF-4 group ('ocean/depth') also answers to its own name ('depth').
  if (i < 0) i = dims.findIndex((d) => d.slice(d.lastIndexOf('/') + 1).toLowerCase() === name.toLowerCase());
  if (i < 0) throw new UsageError(`field '${printable(h.name)}' has no dimension '${printable(name)}'; its dimensions are ${dims.map(printable).join(', ')}`);
  return i;
}

/**
 * Per-axis ranges from --slices and --region: the region's rows and
 * columns are the last two axes. --slices gives one range per leading axis,
 * or one range of the leading axes together (their C-order flat index):
 * for a 3-D field that is the first axis; for more axes it counts whole
 * boxes only where the range is one (say time 1 whole, or depths 2..5 of
 * time 3), else null: the caller reads it as slices (or, for .nc, refuses
 * with {@link notOneBox}).
 */
export function rangesFrom(h: FieldHeader, slices: Span[] | undefined, region: Region | undefined): AxisRange[] | null {
  const nd = ndShape(h);
  const k = nd.length;
  const out: AxisRange[] = nd.map((n) => [0, n]);
  if (region) {
    out[k - 2] = [region.rows[0] ?? 0, region.rows[1] ?? nd[k - 2]];
    out[k - 1] = [region.cols[0] ?? 0, region.cols[1] ?? nd[k - 1]];
  }
  if (slices && slices.length > 1) {
    const lead = dimNames(h).slice(0, k - 2);
    if (slices.length !== k - 2) {
      throw new UsageError(`--slices gives ${slices.length} ranges, but field '${printable(h.name)}' has ${k - 2} leading ${k - 2 === 1 ? 'axis' : 'axes'} (${lead.map(printable).join(', ')}): give one range per leading axis, or one range A:B of them together`);
    }
    slices.forEach(([a, b], i) => void (out[i] = [a ?? 0, b ?? nd[i]]));
  } else if (slices) {
    const flat: AxisRange = [slices[0][0] ?? 0, slices[0][1] ?? nd.slice(0, k - 2).reduce((x, y) => x * y, 1)];
    const box = k < 3 ? null : boxOf(nd.slice(0, k - 2), flat);
    if (box === null) return null;
    box.forEach((r, i) => void (out[i] = r));
  }
  out.forEach(([a, b], i) => {
    if (!(a >= 0 && b <= nd[i] && a < b)) throw new UsageError(`field '${printable(h.name)}' has ${nd[i]} entries along '${printable(dimNames(h)[i])}'; the range ${a}:${b} lies outside 0:${nd[i]}`);
  });
  return out;
}

/**
 * The box (one range per axis) of the C-order flat indexes [a, b) of an
 * array of shape `lead`, when they are exactly a box; else null. A range
 * beyond the array is returned as it is along the first axis, to be refused
 * by the caller's bounds check.
 */
export function boxOf(lead: number[], [a, b]: AxisRange): AxisRange[] | null {
  const total = lead.reduce((x, y) => x * y, 1);
  if (lead.length === 1) return [[a, b]];
  if (a < 0 || b > total || a >= b) return null;
  const index = (f: number) => {
    const idx = lead.map(() => 0);
    for (let i = lead.length - 1; i >= 0; i--) {
      idx[i] = f % lead[i];
      f = Math.floor(f / lead[i]);
    }
    return idx;
  };
  const p = index(a);
  const q = index(b - 1);
  // The bounding box: along each axis, the two ends' indexes while the axes before agree, else the whole axis
  // (a run that crosses from one index of an outer axis to the next passes both ends of every inner one).
  let same = true;
  const box = lead.map((n, i): AxisRange => {
    const r: AxisRange = same ? [p[i], q[i] + 1] : [0, n];
    same &&= p[i] === q[i];
    return r;
  });
  // The run lies within its bounding box, so it is that box exactly when they hold as many cells.
  return box.reduce((x, [lo, hi]) => x * (hi - lo), 1) === b - a ? box : null;
}

/** The refusal of a --slices range of the leading axes together that is no box of them (a .nc window needs one). */
export function notOneBox(h: FieldHeader, [a, b]: AxisRange): string {
  const nd = ndShape(h);
  const k = nd.length;
  const lead = dimNames(h).slice(0, k - 2);
  const sizes = lead.map((d, i) => `${printable(d)} ${nd[i]}`).join(', ');
  return (
    `--slices ${a}:${b} of field '${printable(h.name)}' counts its leading axes together (${sizes}), and slices ${a}..${b - 1} are not one range of each, which a .nc window needs; ` +
    `give one range per leading axis (--slices ${lead.map(() => 'A:B').join(',')}), or write .npy`
  );
}

/**
 * Per-axis ranges from coordinate ranges: for each term, the indexes of
 * the coordinate variable of that dimension (`coords`, by dimension name)
 * whose values lie within LO..HI; they must be one run (coordinates are
 * monotonic, CF conventions 1.x section 5, from memory).
 */
export function rangesWhere(h: FieldHeader, terms: WhereTerm[], coords: (dim: string) => ArrayLike<number> | null): AxisRange[] {
  const nd = ndShape(h);
  const out: AxisRange[] = nd.map((n) => [0, n]);
  const seen = new Set<number>();
  for (const t of terms) {
    const axis = axisOf(h, t.name);
    const dim = dimNames(h)[axis];
    if (seen.has(axis)) throw new UsageError(`--where names dimension '${printable(dim)}' twice`);
    seen.add(axis);
    const c = coords(dim);
    if (c === null || c.length !== nd[axis]) throw new UsageError(`--where ${printable(t.name)}=...: the archive carries no coordinate variable '${printable(dim)}' of ${nd[axis]} values (give index ranges with --region or --slices)`);
    let a = -1;
    let b = -1;
    for (let i = 0; i < c.length; i++) {
      if (c[i] >= t.lo && c[i] <= t.hi) {
        if (a < 0) a = i;
        else if (b !== i - 1) throw new UsageError(`--where ${printable(t.name)}: coordinate '${printable(dim)}' is not monotonic, so ${t.lo}:${t.hi} is not one run of indexes`);
        b = i;
      }
    }
    if (a < 0) {
      let lo = Infinity;
      let hi = -Infinity;
      for (let i = 0; i < c.length; i++) {
        lo = Math.min(lo, c[i]);
        hi = Math.max(hi, c[i]);
      }
      throw new UsageError(`--where ${printable(t.name)}=${t.lo}:${t.hi} selects nothing: coordinate '${printable(dim)}' runs from ${lo} to ${hi}`);
    }
    out[axis] = [a, b + 1];
  }
  return out;
}

/** Copy the bits of element j of `src` into element i of `dst` (same type; NaN payloads kept). */
function bitCopier(src: FloatArray, dst: FloatArray): (i: number, j: number) => void {
  if (src instanceof Float32Array) {
    const s = new Uint32Array(src.buffer, src.byteOffset, src.length);
    const d = new Uint32Array(dst.buffer, dst.byteOffset, dst.length);
    return (i, j) => void (d[i] = s[j]);
  }
  const s = new BigUint64Array(src.buffer, src.byteOffset, src.length);
  const d = new BigUint64Array(dst.buffer, dst.byteOffset, dst.length);
  return (i, j) => void (d[i] = s[j]);
}

/**
 * Read the window `ranges` (one per axis of the N-D shape) of a field laid
 * out as slices, a matrix, or plain 2-D: the stored window covering every
 * element is read once (only its tiles are fetched), then the elements are
 * taken from it in C order.
 */
export async function readAxes(archive: Archive, h: FieldHeader, ranges: AxisRange[]): Promise<{ values: FloatArray; shape: number[] }> {
  const nd = ndShape(h);
  const shape = ranges.map(([a, b]) => b - a);
  return { values: await readFlats(archive, h, flatIndexes(nd, ranges)), shape };
}

/**
 * Read slices [s0, s1) (of the flattened leading axes, as `--slices` counts
 * them), rows and columns (of the last two axes) of a field of any layout,
 * as slices x rows x cols.
 */
export async function readSliceWindow(archive: Archive, h: FieldHeader, s: AxisRange, r: AxisRange, c: AxisRange): Promise<{ values: FloatArray; shape: number[] }> {
  const nd = ndShape(h);
  const k = nd.length;
  const lead = nd.slice(0, k - 2).reduce((x, y) => x * y, 1);
  return { values: await readFlats(archive, h, flatIndexes([lead, nd[k - 2], nd[k - 1]], [s, r, c])), shape: [s[1] - s[0], r[1] - r[0], c[1] - c[0]] };
}

/** Flat C-order indexes of the elements of `ranges` in an array of shape `nd`, in C order. */
function flatIndexes(nd: number[], ranges: AxisRange[]): Float64Array {
  const k = nd.length;
  const n = ranges.reduce((x, [a, b]) => x * (b - a), 1);
  const stride = nd.map((_, i) => nd.slice(i + 1).reduce((x, y) => x * y, 1));
  const flats = new Float64Array(n);
  const idx = ranges.map(([a]) => a);
  for (let e = 0; e < n; e++) {
    let f = 0;
    for (let i = 0; i < k; i++) f += idx[i] * stride[i];
    flats[e] = f;
    for (let i = k - 1; i >= 0 && ++idx[i] === ranges[i][1]; i--) idx[i] = ranges[i][0];
  }
  return flats;
}

/** The values at flat C-order indexes of a field's N-D array, whatever its layout. */
async function readFlats(archive: Archive, h: FieldHeader, flats: Float64Array): Promise<FloatArray> {
  const n = flats.length;
  const [rows, cols] = h.shape;
  const sliced = (h.slices ?? 1) > 1 || h.layout === 'slices';
  // Where flat index f of the N-D array lies in the stored grid: slice, row, column.
  const at = (f: number): [number, number, number] => {
    const s = sliced ? Math.floor(f / (rows * cols)) : 0;
    const rem = f - s * rows * cols;
    return [s, Math.floor(rem / cols), rem % cols];
  };
  const lo = [Infinity, Infinity, Infinity];
  const hi = [-1, -1, -1];
  for (let e = 0; e < n; e++) {
    const p = at(flats[e]);
    for (let j = 0; j < 3; j++) {
      if (p[j] < lo[j]) lo[j] = p[j];
      if (p[j] > hi[j]) hi[j] = p[j];
    }
  }
  const win = await archive.read(h.name, { ...(sliced ? { slices: [lo[0], hi[0] + 1] as [number, number] } : {}), rows: [lo[1], hi[1] + 1], cols: [lo[2], hi[2] + 1] });
  const wr = hi[1] + 1 - lo[1];
  const wc = hi[2] + 1 - lo[2];
  const out = h.dtype === 'f32' ? new Float32Array(n) : new Float64Array(n);
  const copy = bitCopier(win.values, out);
  for (let e = 0; e < n; e++) {
    const [s, r, c] = at(flats[e]);
    copy(e, (s - lo[0]) * wr * wc + (r - lo[1]) * wc + (c - lo[2]));
  }
  return out;
}
