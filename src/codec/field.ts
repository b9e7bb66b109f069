/**
 * Encode a whole 2-D field tile by tile. Pointwise bounds are met per tile;
 * L2 bounds share the field's squared-error budget across tiles, discarding
 * the field-wide smallest singular values first (Eckart-Young).
 */
import { crc32 } from '../format/crc32.js';
import type { Bound, Dtype, FloatArray } from '../types.js';
import { isPointwise, resolveBound } from './bound.js';
import { Cell, fillWords } from './mask.js';
import { ErrorTally } from './tally.js';
import { decodeTile } from './tile-decode.js';
import { encodeL2, encodePointwise, ensureSvd, exactPayload, prepareTile, type PreparedTile } from './tile-encode.js';

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
}

/** Per-tile facts recorded in the index. */
export interface TileStats {
  method: number;
  rank: number;
  valid: number;
  maxErr: number;
  rmse: number;
  valueCrc: number;
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

/** Number of tile rows and columns. */
export function tileGrid(spec: Pick<FieldSpec, 'rows' | 'cols' | 'tileRows' | 'tileCols'>): [number, number] {
  return [Math.ceil(spec.rows / spec.tileRows), Math.ceil(spec.cols / spec.tileCols)];
}

/** Copy tile (ti, tj) out of a row-major field. */
export function extractTile(values: FloatArray, spec: FieldSpec, ti: number, tj: number): { tile: FloatArray; m: number; n: number } {
  const i0 = ti * spec.tileRows;
  const j0 = tj * spec.tileCols;
  const m = Math.min(spec.tileRows, spec.rows - i0);
  const n = Math.min(spec.tileCols, spec.cols - j0);
  const tile = spec.dtype === 'f32' ? new Float32Array(m * n) : new Float64Array(m * n);
  for (let i = 0; i < m; i++) tile.set(values.subarray((i0 + i) * spec.cols + j0, (i0 + i) * spec.cols + j0 + n), i * n);
  return { tile, m, n };
}

/** Min and max over finite values that are not the fill value. */
export function validRange(values: FloatArray, dtype: Dtype, fill: number | null): [number, number] | null {
  const fw = fillWords(fill, dtype);
  const f = fw === null ? NaN : dtype === 'f32' ? Math.fround(fill as number) : (fill as number);
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (!Number.isFinite(v)) continue;
    if (v === f && Object.is(v, f)) continue;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  return lo <= hi ? [lo, hi] : null;
}

/** Decode a payload and measure it against the original tile. */
export function measure(payload: Uint8Array, t: PreparedTile, fill: Uint32Array | null): { stats: TileStats; tally: ErrorTally } {
  const out = decodeTile(payload, { m: t.m, n: t.n, dtype: t.dtype, fill, where: 'encoder check' });
  const codes = t.classes.codes;
  const tally = new ErrorTally();
  for (let c = 0; c < codes.length; c++) {
    if (codes[c] === Cell.Valid) tally.add(Math.abs(t.orig[c] - out[c]));
  }
  const rank = payload[0] === 1 ? payload[2] | (payload[3] << 8) : 0;
  const valueCrc = crc32(new Uint8Array(out.buffer, out.byteOffset, out.byteLength));
  return { stats: { method: payload[0], rank, valid: t.valid, maxErr: tally.max, rmse: tally.rmse, valueCrc }, tally };
}

/** Encode every tile of a field, handing each to `emit` in row-major tile order. */
export function encodeField(values: FloatArray, spec: FieldSpec, emit: (index: number, tile: EncodedTile) => void): FieldResult {
  const range = validRange(values, spec.dtype, spec.fill);
  const span = range ? range[1] - range[0] : 0;
  let tol = resolveBound(spec.bound, span);
  if (!Number.isFinite(tol)) tol = Number.MAX_VALUE;
  const fill = fillWords(spec.fill, spec.dtype);
  const [gr, gc] = tileGrid(spec);
  const prep = (ti: number, tj: number): PreparedTile => {
    const { tile, m, n } = extractTile(values, spec, ti, tj);
    return prepareTile(tile, m, n, spec.dtype, fill);
  };
  const summary = { tolerance: tol, range, valid: 0, maxErr: 0, rmse: 0 };
  const total = new ErrorTally();
  const finish = (index: number, t: PreparedTile, payload: Uint8Array, pointwise: boolean): void => {
    let res = measure(payload, t, fill);
    // The safety net: a pointwise tile that fails its own check is stored exactly.
    if (pointwise && !(res.stats.maxErr <= tol)) {
      payload = exactPayload(t);
      res = measure(payload, t, fill);
    }
    summary.valid += t.valid;
    total.merge(res.tally);
    emit(index, { payload, stats: res.stats });
  };
  if (isPointwise(spec.bound.mode) || tol === 0) {
    for (let ti = 0; ti < gr; ti++) {
      for (let tj = 0; tj < gc; tj++) {
        const t = prep(ti, tj);
        finish(ti * gc + tj, t, encodePointwise(t, tol), true);
      }
    }
  } else {
    const plan = planL2(values, spec, prep, gr, gc, tol, fill);
    plan.tiles.forEach((payload, index) => finish(index, plan.prepared(index), payload, false));
  }
  summary.maxErr = total.max;
  summary.rmse = total.rmse;
  return summary;
}

/** Shares of the squared-error budget given to rank truncation, tried in turn. */
const TRUNCATION_SHARES = [0.5, 0.8, 0.3];

/** Fractions of sqrt(3) x RMSE limit tried as the pointwise limit of residual plans. */
const RESIDUAL_FACTORS = [0.97, 0.85, 0.7, 0.5];

/**
 * Choose ranks and steps for an L2 bound: the field's SSE budget N*E^2 is
 * split between truncation (smallest singular values field-wide first) and
 * factor quantization; every plan is verified by decoding, and the smallest
 * plan that meets the budget wins. All-exact is the plan of last resort.
 */
function planL2(
  values: FloatArray,
  spec: FieldSpec,
  prep: (ti: number, tj: number) => PreparedTile,
  gr: number,
  gc: number,
  tol: number,
  fill: Uint32Array | null,
): { tiles: Uint8Array[]; prepared: (index: number) => PreparedTile } {
  const count = gr * gc;
  // Keep prepared tiles (with SVDs) in memory for fields up to 4M cells; else recompute.
  const keep = spec.rows * spec.cols <= 4 << 20;
  const cache: (PreparedTile | null)[] = new Array(count).fill(null);
  const get = (index: number): PreparedTile => {
    const hit = cache[index];
    if (hit) return hit;
    const t = prep(Math.floor(index / gc), index % gc);
    if (keep) cache[index] = t;
    return t;
  };
  const sv: Float64Array[] = [];
  const dims: [number, number][] = [];
  let valid = 0;
  for (let index = 0; index < count; index++) {
    const t = get(index);
    valid += t.valid;
    dims.push([t.m, t.n]);
    sv.push(t.valid > 0 && t.finite ? ensureSvd(t).s.slice() : new Float64Array(0));
  }
  // Squared errors are counted in units of tol^2, so nothing overflows: the budget is the valid count.
  const budget = valid;
  const sv2 = sv.map((s) => s.map((v) => (v / tol) * (v / tol)));
  // All singular values, smallest first, as (tile, k) pairs.
  const order: [number, number, number][] = [];
  sv2.forEach((s, t) => s.forEach((v2, k) => order.push([v2, t, k])));
  order.sort((a, b) => a[0] - b[0] || b[2] - a[2] || a[1] - b[1]);

  let best: Uint8Array[] | null = null;
  let bestBytes = Infinity;
  /** Encode every tile with `one`; keep the plan if it meets the budget with fewer bytes. */
  const tryPlan = (one: (t: PreparedTile, index: number) => Uint8Array): boolean => {
    const tiles: Uint8Array[] = [];
    const tally = new ErrorTally();
    let bytes = 0;
    for (let index = 0; index < count; index++) {
      const t = get(index);
      const p = one(t, index);
      tally.merge(measure(p, t, fill).tally);
      bytes += p.length;
      tiles.push(p);
    }
    if (!(tally.rmse <= tol)) return false;
    if (bytes < bestBytes) {
      best = tiles;
      bestBytes = bytes;
    }
    return true;
  };
  // Plans by Eckart-Young: truncate field-wide, quantize factors, no residual.
  for (const share of TRUNCATION_SHARES) {
    for (let attempt = 0; attempt < 4; attempt++) {
      const tighten = Math.pow(0.5, attempt);
      const ranks = sv.map((s) => s.length);
      let cut = 0;
      for (const [v2, t] of order) {
        if (cut + v2 > share * tighten * budget) break;
        cut += v2;
        ranks[t]--;
      }
      const q = Math.max(0, budget * tighten - cut) * 0.9;
      let sumRN = 0;
      let sumME = 0;
      ranks.forEach((r, t) => {
        sumRN += r * dims[t][1];
        let e = 0;
        for (let k = 0; k < r; k++) e += sv2[t][k];
        sumME += dims[t][0] * e;
      });
      // Steps that spend half the quantization budget on each factor (uniform noise, step^2 / 12 per coefficient).
      const dw = sumRN > 0 ? tol * Math.sqrt((6 * q) / sumRN) : tol;
      const du = sumME > 0 ? Math.sqrt((6 * q) / sumME) : 1;
      if (!(dw > 0 && du > 0 && Number.isFinite(dw) && Number.isFinite(du))) break;
      const ok = tryPlan((t, index) => (q > 0 || ranks[index] === sv[index].length ? encodeL2(t, ranks[index], du, dw) : exactPayload(t)));
      if (ok) break;
    }
  }
  // Plans with a residual: the pointwise coder at a limit E' whose uniform
  // quantization error, (2E')^2 / 12 per value, fits the budget (common practice, no source).
  for (const f of RESIDUAL_FACTORS) {
    if (tryPlan((t) => encodePointwise(t, Math.sqrt(3) * tol * f))) break;
  }
  if (!best) {
    best = [];
    for (let index = 0; index < count; index++) best.push(exactPayload(get(index)));
  }
  return { tiles: best, prepared: get };
}
