/**
 * Planning for L2 bounds (rmse, psnr). The field's squared-error budget,
 * N x E^2 over its N valid values, is shared across tiles: the first pass
 * takes every tile's singular values, candidate plans are costed on a sample
 * of tiles, and the chosen plan gives each tile an allotment of the budget
 * that the second pass enforces tile by tile, so the whole-field RMSE holds
 * by construction and tiles can be written as they are finished.
 */
import { measure } from './measure.js';
import { forEachTile, type BandSource, type FieldSpec } from './tiles.js';
import type { FloatArray } from '../types.js';
import { gramSingularValues } from '../linalg/spectrum.js';
import { prepareTile, type PreparedTile } from './prepare.js';
import { encodeL2, encodePointwise, exactPayload, rankZeroForMse } from './tile-encode.js';

/** Shares of the budget given to rank truncation in the Eckart-Young plans. */
const TRUNCATION_SHARES = [0.3, 0.5, 0.8];
/** Tiles costed per candidate plan. */
const SAMPLE_TILES = 48;
/** Prepared tiles are kept between passes for fields up to this many cells. */
const KEEP_CELLS = 4 << 20;

/**
 * One way to encode every tile, as plain data (so a plan can be handed to
 * another thread): 'rank' encodes tile i at rank ranks[i] with factor steps
 * c and dw; 'residual' runs the pointwise coder at ePrime (or a rank-0
 * residual with rate-distortion optimised codes, if smaller). allot[i] is tile
 * i's share of the budget, in units of tol^2.
 */
export interface L2PlanData {
  name: string;
  kind: 'rank' | 'residual';
  ranks: Int32Array;
  c: number;
  dw: number;
  ePrime: number;
  allot: Float64Array;
  tol: number;
}

/** The chosen plan, enforced tile by tile. */
export interface L2Plan {
  name: string;
  data: L2PlanData;
  /** The tile prepared in the first pass, when the field was small enough to keep it. */
  kept(index: number): PreparedTile | undefined;
  encode(t: PreparedTile, index: number): { payload: Uint8Array; res: ReturnType<typeof measure> };
}

/** A tile's payload under a plan, before its allotment is enforced. */
function encodeWith(p: L2PlanData, t: PreparedTile, index: number): Uint8Array {
  if (p.kind === 'rank') return encodeL2(t, p.ranks[index], p.c, p.dw);
  // The pointwise coder at ePrime, or a rank-0 residual whose codes are chosen for rate as well as error: the smaller.
  const plain = encodePointwise(t, p.ePrime);
  const rdo = rankZeroForMse(t, 0.97 * p.tol * p.tol);
  return rdo !== null && rdo.length < plain.length ? rdo : plain;
}

/** What the first pass learns of one tile (and the tile itself, prepared, while a field is small enough to keep). */
export interface FirstPassTile {
  /** Squared singular values in units of tol^2, so nothing overflows. */
  sv2: Float64Array;
  /** Rows, columns and valid cells. */
  dims: [number, number, number];
  tile?: PreparedTile;
}

/** Whether the first pass keeps its prepared tiles for the second (fields up to KEEP_CELLS). */
export function keepsTiles(spec: Pick<FieldSpec, 'rows' | 'cols' | 'slices'>): boolean {
  return (spec.slices ?? 1) * spec.rows * spec.cols <= KEEP_CELLS;
}

/** The first pass over one tile: prepare it and take its whole spectrum. */
export function firstPassTile(tile: FloatArray, m: number, n: number, spec: Pick<FieldSpec, 'dtype' | 'progressive'>, fill: Uint32Array | null, tol: number, keep: boolean): FirstPassTile {
  const t = prepareTile(tile, m, n, spec.dtype, fill, tol, spec.progressive ? 'doubling' : 'one');
  const usable = t.valid > 0 && t.finite;
  // The full spectrum: cutting the field-wide smallest values needs every one of them, and only
  // their squares to the budget's accuracy, so the Gram matrix's eigenvalues serve (src/linalg/spectrum.ts).
  // The second pass computes singular vectors only up to the rank it codes.
  const s = !usable ? new Float64Array(0) : gramSingularValues(t.centred, m, n);
  return { sv2: s.map((v) => (v / tol) * (v / tol)), dims: [m, n, t.valid], ...(keep ? { tile: t } : {}) };
}

/**
 * First pass and plan choice; the returned plan encodes one tile at a time.
 * `first` gives the first pass's results in tile order when it was made
 * elsewhere (on worker threads); by default it is made here.
 */
export function planL2(src: BandSource, spec: FieldSpec, tol: number, fill: Uint32Array | null, first?: FirstPassTile[]): L2Plan {
  const keep = keepsTiles(spec);
  if (first === undefined) {
    const made: FirstPassTile[] = [];
    forEachTile(src, spec, (_index, tile, m, n) => made.push(firstPassTile(tile, m, n, spec, fill, tol, keep)));
    first = made;
  }
  const kept = keep ? first.map((f) => f.tile!) : [];
  const sv2 = first.map((f) => f.sv2);
  const dims = first.map((f) => f.dims);
  const count = dims.length;
  let valid = 0;
  for (const d of dims) valid += d[2];
  const budget = valid; // N x tol^2, in units of tol^2
  const plans: L2PlanData[] = [];
  for (const share of TRUNCATION_SHARES) {
    const p = eckartYoungPlan(sv2, dims, budget, share, tol);
    if (p) plans.push(p);
  }
  // Residual plan: the pointwise coder at E' with uniform quantization error
  // (2E')^2 / 12 = E^2 per value (common practice, no source), a little inside; or, per tile, a
  // rank-0 residual with rate-distortion optimised codes when that is smaller (encodeWith).
  const ePrime = Math.sqrt(3) * tol * 0.97;
  plans.push({ name: 'residual', kind: 'residual', ranks: new Int32Array(0), c: 0, dw: 0, ePrime, allot: Float64Array.from(dims, (d) => 0.999 * d[2]), tol });

  const sampleAt = (k: number) => Math.floor(((k + 0.5) * count) / Math.min(count, SAMPLE_TILES));
  let best = plans[plans.length - 1];
  if (plans.length > 1) {
    let bestBytes = Infinity;
    const sample: number[] = [];
    for (let k = 0; k < Math.min(count, SAMPLE_TILES); k++) sample.push(sampleAt(k));
    // Sampling needs tiles in memory; for large fields, sample from a fresh read.
    const sampled = keep ? sample.map((i) => kept[i]) : readSample(src, spec, fill, new Set(sample), tol);
    for (const p of plans) {
      let bytes = 0;
      sample.forEach((index, k) => (bytes += encodeWith(p, sampled[k], index).length));
      if (bytes < bestBytes) {
        bestBytes = bytes;
        best = p;
      }
    }
    // The trial left singular vectors (of whatever rank it needed) on the sampled tiles; the second
    // pass must find every kept tile as the first pass left it, as a part of a run prepares it afresh.
    if (keep) for (const t of sampled) t.svd = null;
  }
  return l2Plan(best, fill, (index) => (keep ? kept[index] : undefined));
}

/**
 * A plan from its data: each tile encoded as the plan says, then held to its
 * allotment by tighter residual coding, then exact storage. `kept` serves
 * tiles prepared in the first pass (none by default).
 */
export function l2Plan(data: L2PlanData, fill: Uint32Array | null, kept: (index: number) => PreparedTile | undefined = () => undefined): L2Plan {
  const tol = data.tol;
  return {
    name: data.name,
    data,
    kept,
    encode(t, index) {
      const allotment = data.allot[index];
      let payload = encodeWith(data, t, index);
      let res = measure(payload, t, fill);
      // Enforce the tile's allotment: tighter residual coding, then exact storage.
      for (const f of [0.9, 0.7, 0.5]) {
        if (fits(res.tally.rmse, t.valid, allotment, tol)) break;
        const e = Math.sqrt((3 * allotment) / Math.max(1, t.valid)) * tol * f;
        payload = encodePointwise(t, e);
        res = measure(payload, t, fill);
      }
      if (!fits(res.tally.rmse, t.valid, allotment, tol)) {
        payload = exactPayload(t);
        res = measure(payload, t, fill);
      }
      return { payload, res };
    },
  };
}

/** Whether a tile's squared error, valid x rmse^2, is within its allotment (units of tol^2). */
function fits(rmse: number, valid: number, allotment: number, tol: number): boolean {
  if (valid === 0) return true;
  const r = rmse / tol;
  return valid * r * r <= allotment;
}

/** Prepared tiles at the given indexes, from one more pass over the source. */
function readSample(src: BandSource, spec: FieldSpec, fill: Uint32Array | null, want: Set<number>, tol: number): PreparedTile[] {
  const out: PreparedTile[] = [];
  forEachTile(src, spec, (index, tile, m, n) => {
    if (want.has(index)) out.push(prepareTile(tile, m, n, spec.dtype, fill, tol, spec.progressive ? 'doubling' : 'one'));
  });
  return out;
}

/**
 * The Eckart-Young plan for a truncation share: discard the field-wide
 * smallest singular values until their squares reach share x budget; the
 * rest of the budget goes to factor quantization, half to each factor,
 * with uniform noise step^2 / 12 per coefficient.
 */
function eckartYoungPlan(
  sv2: Float64Array[],
  dims: [number, number, number][],
  budget: number,
  share: number,
  tol: number,
): L2PlanData | null {
  // Cuts per tile, smallest singular value first (every tile's spectrum is complete). Keys are
  // made non-decreasing within a tile so that a global ascending order never cuts a tile's
  // larger value before its smaller ones.
  const order: [number, number, number][] = []; // [key, tile, squared value]
  const ranks: number[] = [];
  sv2.forEach((s, t) => {
    let key = 0;
    ranks.push(s.length);
    for (let k = s.length - 1; k >= 0; k--) {
      key = Math.max(key, s[k]);
      order.push([key, t, s[k]]);
    }
  });
  order.sort((a, b) => a[0] - b[0] || a[1] - b[1]);
  const cut = new Float64Array(sv2.length);
  // A tile whose next cut does not fit is closed: its larger values cannot be cut either.
  const closed = new Uint8Array(sv2.length);
  let total = 0;
  for (const [, t, v2] of order) {
    if (closed[t]) continue;
    if (!(total + v2 <= share * budget)) {
      closed[t] = 1;
      continue;
    }
    total += v2;
    cut[t] += v2;
    ranks[t] -= 1;
  }
  const q = (budget - total) * 0.9;
  // Half of q to each factor, as uniform rounding noise step^2 / 12 per coefficient:
  // the right factor with one step dw, the left with step c / s_k for rank k (see quantizeFactors).
  let sumRN = 0;
  let sumRM = 0;
  ranks.forEach((r, t) => {
    sumRN += r * dims[t][1];
    sumRM += r * dims[t][0];
  });
  const dw = sumRN > 0 ? tol * Math.sqrt((6 * q) / sumRN) : tol;
  const c = sumRM > 0 ? tol * Math.sqrt((6 * q) / sumRM) : tol;
  if (!(dw > 0 && c > 0 && Number.isFinite(dw) && Number.isFinite(c))) return null;
  // Each tile's allotment: its truncation error plus its expected quantization noise,
  // scaled so the allotments add up to the budget.
  const predicted = ranks.map((r, t) => {
    const [m, n] = dims[t];
    return cut[t] + (r * n * (dw / tol) ** 2) / 12 + (r * m * (c / tol) ** 2) / 12;
  });
  let sum = 0;
  for (const p of predicted) sum += p;
  // A hair inside the budget, so rounding in the sums cannot tip the total over.
  const scale = sum > 0 ? (0.999 * budget) / sum : 0;
  return { name: `eckart-young ${share}`, kind: 'rank', ranks: Int32Array.from(ranks), c, dw, ePrime: 0, allot: Float64Array.from(predicted, (p) => p * scale), tol };
}
