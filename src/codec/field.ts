/**
 * Encode a whole 2-D field tile by tile. Pointwise bounds are met per tile;
 * L2 bounds share the field's squared-error budget across tiles, discarding
 * the field-wide smallest singular values first (Eckart-Young).
 */
import { FormatError } from '../errors.js';
import { crc32 } from '../format/crc32.js';
import type { Bound, Dtype, FloatArray } from '../types.js';
import { isPointwise, resolveBound } from './bound.js';
import { Cell, fillWords } from './mask.js';
import { ErrorTally } from './tally.js';
import { payloadHead, prefixLengths } from './payload.js';
import { decodeTile } from './tile-decode.js';
import { planL2 } from './plan-l2.js';
import { prepareTile, type PreparedTile } from './prepare.js';
import { encodePointwise, exactPayload } from './tile-encode.js';

/** What the encoder needs to know about a field. */
export interface FieldSpec {
  name: string;
  dtype: Dtype;
  rows: number;
  cols: number;
  tileRows: number;
  tileCols: number;
  bound: Bound;
  fill: number | null;
  /** Choose the tile shape by trial (see auto-tile.ts); tileRows/tileCols are then replaced. */
  autoTile?: boolean;
  /** Store factors in groups of ranks 1, 1, 2, 4, ... so readers can stop after any group (costs bytes). */
  progressive?: boolean;
  /**
   * Slices of rows x cols stacked in the field (default 1). The source then
   * serves rows of the stacked (slices x rows) x cols matrix: rows
   * [s * rows, (s + 1) * rows) are slice s. Tiles never cross slices.
   */
  slices?: number;
}

/** Per-tile facts recorded in the index. */
export interface TileStats {
  method: number;
  rank: number;
  valid: number;
  maxErr: number;
  rmse: number;
  valueCrc: number;
  /**
   * Progressive prefixes, four numbers each: byte length, CRC-32 of those
   * bytes, max error and RMSE of the values they decode to (factor groups
   * only, no residual). Only prefixes shorter than the payload are listed.
   */
  prefix: number[];
}

/** A finished tile. */
export interface EncodedTile {
  payload: Uint8Array;
  stats: TileStats;
}

/** What a field's encoding achieved. */
export interface FieldResult {
  /** The resolved absolute tolerance (pointwise limit, or RMSE limit). */
  tolerance: number;
  /** Min and max of the valid values (null when there are none). */
  range: [number, number] | null;
  valid: number;
  maxErr: number;
  rmse: number;
}

/** Number of tile rows and columns of one slice. */
export function tileGrid(spec: Pick<FieldSpec, 'rows' | 'cols' | 'tileRows' | 'tileCols'>): [number, number] {
  return [Math.ceil(spec.rows / spec.tileRows), Math.ceil(spec.cols / spec.tileCols)];
}

/**
 * Where the encoder reads a field from: bands of whole rows, so a field
 * larger than memory can be packed one band of tiles at a time.
 */
export interface BandSource {
  /** Rows [r0, r0 + count) as row-major values of the field's dtype. */
  band(r0: number, count: number): FloatArray;
}

/** A band source over a field already in memory. */
export function memoryBands(values: FloatArray, cols: number): BandSource {
  return { band: (r0, count) => values.subarray(r0 * cols, (r0 + count) * cols) };
}

/** Copy tile column tj out of a band holding the tile row's rows. */
export function extractTile(band: FloatArray, spec: FieldSpec, bandRows: number, tj: number): { tile: FloatArray; m: number; n: number } {
  const j0 = tj * spec.tileCols;
  const m = bandRows;
  const n = Math.min(spec.tileCols, spec.cols - j0);
  const tile = spec.dtype === 'f32' ? new Float32Array(m * n) : new Float64Array(m * n);
  for (let i = 0; i < m; i++) tile.set(band.subarray(i * spec.cols + j0, i * spec.cols + j0 + n), i * n);
  return { tile, m, n };
}

/**
 * Visit every tile in index order (slice by slice, row-major within a
 * slice: t = s * gr * gc + ti * gc + tj), reading one band of rows per tile row.
 */
export function forEachTile(src: BandSource, spec: FieldSpec, visit: (index: number, tile: FloatArray, m: number, n: number) => void): void {
  const [gr, gc] = tileGrid(spec);
  const slices = spec.slices ?? 1;
  for (let s = 0; s < slices; s++) {
    for (let ti = 0; ti < gr; ti++) {
      const r0 = ti * spec.tileRows;
      const rows = Math.min(spec.tileRows, spec.rows - r0);
      const band = src.band(s * spec.rows + r0, rows);
      for (let tj = 0; tj < gc; tj++) {
        const { tile, m, n } = extractTile(band, spec, rows, tj);
        visit(s * gr * gc + ti * gc + tj, tile, m, n);
      }
    }
  }
}

/** Min and max over finite values that are not the fill value, read band by band. */
export function validRange(src: BandSource, spec: FieldSpec): [number, number] | null {
  const fw = fillWords(spec.fill, spec.dtype);
  const f = fw === null ? NaN : spec.dtype === 'f32' ? Math.fround(spec.fill as number) : (spec.fill as number);
  let lo = Infinity;
  let hi = -Infinity;
  const step = Math.max(1, spec.tileRows);
  const total = (spec.slices ?? 1) * spec.rows;
  // Bands stay within a slice, as the encoder's own reads do.
  for (let r0 = 0, end = 0; r0 < total; r0 = end) {
    end = Math.min(total, r0 + step, (Math.floor(r0 / spec.rows) + 1) * spec.rows);
    const values = src.band(r0, end - r0);
    for (let i = 0; i < values.length; i++) {
      const v = values[i];
      if (!Number.isFinite(v)) continue;
      if (v === f && Object.is(v, f)) continue;
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
  }
  return lo <= hi ? [lo, hi] : null;
}

/** Decode a payload and measure it against the original tile. */
export function measure(payload: Uint8Array, t: PreparedTile, fill: Uint32Array | null): { stats: TileStats; tally: ErrorTally } {
  const codes = t.classes.codes;
  const tally = new ErrorTally();
  let out: FloatArray;
  try {
    out = decodeTile(payload, { m: t.m, n: t.n, dtype: t.dtype, fill, where: 'encoder check' });
  } catch (e) {
    // A candidate the decoder refuses (e.g. values rounding past the float32 maximum)
    // fails every bound, so the caller falls back to exact storage.
    if (!(e instanceof FormatError)) throw e;
    tally.add(NaN);
    return { stats: { method: payload[0], rank: 0, valid: t.valid, maxErr: NaN, rmse: NaN, valueCrc: 0, prefix: [] }, tally };
  }
  for (let c = 0; c < codes.length; c++) {
    if (codes[c] === Cell.Valid) tally.add(Math.abs(t.orig[c] - out[c]));
  }
  const { rank } = payloadHead(payload);
  const valueCrc = crc32(new Uint8Array(out.buffer, out.byteOffset, out.byteLength));
  return { stats: { method: payload[0], rank, valid: t.valid, maxErr: tally.max, rmse: tally.rmse, valueCrc, prefix: [] }, tally };
}

/** A prefix is recorded only if it is at most this share of its payload ... */
const PREFIX_MAX_SHARE = 0.75;
/** ... and saves at least this many bytes. */
const PREFIX_MIN_SAVING = 64;

/**
 * Measure every progressive prefix of a payload with the decoder's own
 * prefix reading, so a reader can choose one from the index alone.
 */
export function measurePrefixes(payload: Uint8Array, t: PreparedTile, fill: Uint32Array | null): number[] {
  const out: number[] = [];
  const lens = prefixLengths(payload);
  lens.forEach((len, groups) => {
    // The centre alone (no factor group) is never worth offering: its error is about the tile's range.
    if (groups === 0) return;
    // A prefix is worth its index entry (about 30 bytes) only if it saves a good share of the payload.
    if (len > PREFIX_MAX_SHARE * payload.length || payload.length - len < PREFIX_MIN_SAVING) return;
    const bytes = payload.subarray(0, len);
    let values: FloatArray;
    try {
      values = decodeTile(bytes, { m: t.m, n: t.n, dtype: t.dtype, fill, where: 'encoder check', groups });
    } catch (e) {
      if (e instanceof FormatError) return; // a prefix that does not decode (values past the float maximum) is not offered
      throw e;
    }
    const tally = new ErrorTally();
    const codes = t.classes.codes;
    for (let c = 0; c < codes.length; c++) if (codes[c] === Cell.Valid) tally.add(Math.abs(t.orig[c] - values[c]));
    if (Number.isFinite(tally.max)) out.push(len, crc32(bytes), tally.max, tally.rmse);
  });
  return out;
}

/**
 * Encode every tile of a field, handing each to `emit` in row-major tile
 * order as soon as it is done. The source is read once for the value range
 * and once more per encoding pass (L2 bounds make one extra pass).
 */
export function encodeField(src: BandSource, spec: FieldSpec, emit: (index: number, tile: EncodedTile) => void): FieldResult {
  const range = validRange(src, spec);
  const span = range ? range[1] - range[0] : 0;
  let tol = resolveBound(spec.bound, span);
  if (!Number.isFinite(tol)) tol = Number.MAX_VALUE;
  const fill = fillWords(spec.fill, spec.dtype);
  const summary = { tolerance: tol, range, valid: 0, maxErr: 0, rmse: 0 };
  const total = new ErrorTally();
  const pointwise = isPointwise(spec.bound.mode) || tol === 0;
  const plan = pointwise ? null : planL2(src, spec, tol, fill);
  forEachTile(src, spec, (index, tile, m, n) => {
    const t = plan?.kept(index) ?? prepareTile(tile, m, n, spec.dtype, fill, tol, spec.progressive ? 'doubling' : 'one');
    let payload: Uint8Array;
    let res: ReturnType<typeof measure>;
    if (plan) ({ payload, res } = plan.encode(t, index));
    else {
      payload = encodePointwise(t, tol);
      res = measure(payload, t, fill);
      // The safety net: a tile that fails its own check is stored exactly.
      if (!(res.stats.maxErr <= tol)) {
        payload = exactPayload(t);
        res = measure(payload, t, fill);
      }
    }
    summary.valid += t.valid;
    total.merge(res.tally);
    res.stats.prefix = measurePrefixes(payload, t, fill);
    emit(index, { payload, stats: res.stats });
  });
  summary.maxErr = total.max;
  summary.rmse = total.rmse;
  return summary;
}
