/**
 * Encode one tile's payloads: quantized factors (with the least-squares
 * refit of the second), the residual's check against a pointwise bound
 * (correct), the predictors' and coders' choice for it, the blend variant,
 * the exact payload, and the payload's bytes. The pointwise search that
 * tries candidates built of these is ./pointwise-search.ts.
 */
import { ByteWriter } from '../format/bytes.js';
import { solveSpd } from '../linalg/spd.js';
import { Cell } from './mask.js';
import { ensureSvd, type PreparedTile } from './prepare.js';
import { CENTRE_FORM_SHIFT, CentreForm, centreForm, Flag, Method, RESIDUAL_SYMBOLS, residualPlace, STEP_FORM_SHIFT, StepForm, stepForm } from './payload.js';
import { blendDifferences, predict, predictorBitsOf, predictedFill, Predictor, PREDICTOR_SUMS } from './reconstruct.js';

/** Predictors tried for the residual, besides none. */
const PREDICTORS = [Predictor.Lorenzo, Predictor.Left, Predictor.Up, Predictor.Average, Predictor.Median, Predictor.Blend];
/** The blend (tried last) is taken only when its coded stream is below this share of the best other predictor's. */
const BLEND_MARGIN = 0.99;
import { encodeInts, encodeIntsWithin } from './code-encode.js';
import { decodeInts } from './code-decode.js';
import { encodeSymbolsWithin } from './code-symbols-encode.js';
import { MAX_INT } from './section.js';
import { settleCodes, unsettledCells } from './settle.js';
import { refitKernel } from '../wasm/refit.js';
import { writeSection } from './section-write.js';
import { maskedPredictorBits } from '../wasm/masked.js';
import { binary32Below, MIN_STEP, stepCode, stepValue } from './steps.js';

/** The exact payload: byte-shuffled values, DEFLATE. */
export function exactPayload(t: PreparedTile): Uint8Array {
  const width = t.dtype === 'f32' ? 4 : 8;
  const cells = t.m * t.n;
  const src = new Uint8Array(t.orig.buffer, t.orig.byteOffset, t.orig.byteLength);
  const planes = new Uint8Array(cells * width);
  for (let b = 0; b < width; b++) {
    for (let c = 0; c < cells; c++) planes[b * cells + c] = src[c * width + b];
  }
  const w = new ByteWriter(planes.length / 2 + 64);
  w.u8(Method.Exact);
  w.u8(0);
  writeSection(w, planes);
  return w.finish();
}

/** Quantized factors of one candidate rank. */
export interface Factors {
  rank: number;
  codeU: Int16Array;
  /** The right factor's step code, one for every rank. */
  codeW: number;
  /** Column k of the left factor: qu[k*m + i]. */
  qu: Int32Array;
  /** Row k of the right factor: qw[k*n + j]. */
  qw: Int32Array;
  /** Dequantized factors in the layout {@link lowRank} takes. */
  l: Float64Array;
  w: Float64Array;
}

/**
 * Quantize the first r left singular vectors, vector k with step c / s_k
 * (so every rank adds the same rounding noise, c^2 m / 12, to the tile:
 * equal noise per coefficient is the high-rate optimum of uniform
 * quantization; from memory), refit the right factor by least squares
 * against the tile (W = (Lq^T Lq)^-1 Lq^T A, the pseudo-inverse solution),
 * then quantize it with step dw.
 */
export function quantizeFactors(t: PreparedTile, r: number, c: number, dwTarget: number): Factors | null {
  const { m, n } = t;
  const s = ensureSvd(t, r);
  if (!(dwTarget >= MIN_STEP && Number.isFinite(dwTarget) && c > 0 && Number.isFinite(c))) return null;
  const codeU = new Int16Array(r);
  const cw = stepCode(dwTarget);
  const dw = stepValue(cw);
  const qu = new Int32Array(r * m);
  const l = new Float64Array(m * r);
  // Singular values below this share of the largest are treated as this small.
  const floor = s.s[0] * 1e-12;
  for (let k = 0; k < r; k++) {
    const duTarget = c / Math.max(s.s[k], floor);
    if (!(duTarget >= MIN_STEP && Number.isFinite(duTarget))) return null;
    codeU[k] = stepCode(Math.min(duTarget, 2 ** 900));
    const du = stepValue(codeU[k]);
    for (let i = 0; i < m; i++) {
      const q = Math.round(s.u[i * s.k + k] / du);
      if (Math.abs(q) > MAX_INT) return null;
      qu[k * m + i] = q;
      l[i * r + k] = q * du;
    }
  }
  // Normal equations of the refit: G = Lq^T Lq (r x r), B = Lq^T A (r x n), each entry summed in increasing
  // row i over the rows whose left factor entry is not zero. B, r multiply-adds a cell of the tile, in the
  // WebAssembly kernel where there is one (src/wasm/refit.ts): the same bits.
  const g = new Float64Array(r * r);
  const b = new Float64Array(r * n);
  const a = t.centred;
  for (let i = 0; i < m; i++) {
    for (let k = 0; k < r; k++) {
      const lik = l[i * r + k];
      if (lik === 0) continue;
      for (let k2 = 0; k2 < r; k2++) g[k * r + k2] += lik * l[i * r + k2];
    }
  }
  // A left vector quantized to all zeros leaves G singular: such a rank adds nothing.
  for (let k = 0; k < r; k++) if (g[k * r + k] === 0) return null;
  if (!refitKernel(l, r, a, m, n, b)) refitRows(l, r, a, m, n, b);
  solveSpd(g, r, b, n);
  const qw = new Int32Array(r * n);
  const w = new Float64Array(r * n);
  for (let k = 0; k < r * n; k++) {
    const q = Math.round(b[k] / dw);
    if (!(Math.abs(q) <= MAX_INT)) return null;
    qw[k] = q;
    w[k] = q * dw;
  }
  return { rank: r, codeU, codeW: cw, qu, qw, l, w };
}

/**
 * b (r x n, zeros) = l^T a (l m x r, a m x n, row-major), as {@link refitKernel}
 * sums it: row by row, four of b's rows at a time over a row's non-zero
 * entries of l, each load of a's row feeding four of them.
 */
function refitRows(l: Float64Array, r: number, a: Float64Array, m: number, n: number, b: Float64Array): void {
  const nz = new Int32Array(r);
  for (let i = 0; i < m; i++) {
    let count = 0;
    for (let k = 0; k < r; k++) if (l[i * r + k] !== 0) nz[count++] = k;
    const row = i * n;
    let z = 0;
    for (; z + 3 < count; z += 4) {
      const b0 = nz[z] * n;
      const b1 = nz[z + 1] * n;
      const b2 = nz[z + 2] * n;
      const b3 = nz[z + 3] * n;
      const l0 = l[i * r + nz[z]];
      const l1 = l[i * r + nz[z + 1]];
      const l2 = l[i * r + nz[z + 2]];
      const l3 = l[i * r + nz[z + 3]];
      for (let j = 0; j < n; j++) {
        const x = a[row + j];
        b[b0 + j] += l0 * x;
        b[b1 + j] += l1 * x;
        b[b2 + j] += l2 * x;
        b[b3 + j] += l3 * x;
      }
    }
    for (; z < count; z++) {
      const bk = nz[z] * n;
      const lik = l[i * r + nz[z]];
      for (let j = 0; j < n; j++) b[bk + j] += lik * a[row + j];
    }
  }
}

/** What the pointwise search lends correct(): code grids that no candidate holds any more (correct() takes one of the tile's size). */
export interface SearchScratch {
  spare: Int32Array[];
}

/**
 * This thread's code grids that no candidate holds any more, kept from tile
 * to tile: the pointwise search settles its candidates' codes into them
 * (correct() writes every cell) rather than into new ones, which cost the
 * collector and page faults (a 1024 x 1024 tile's grid is 4 MiB). The
 * grids of the candidates a search drops or does not pick are given back;
 * at most {@link SPARE_BYTES} are kept.
 */
export const searchGrids: SearchScratch = { spare: [] };
/** Four grids of a 1024 x 1024 tile, more than a search holds spare at once (half the kernels' memory kept between uses, src/wasm/kernels.ts KEEP_BYTES). */
const SPARE_BYTES = 16 * 1024 * 1024;

/** Give back the code grids of a candidate no one holds any more (none of `keep`'s). */
export function giveBack(corr: Correction, keep: Correction | null = null): void {
  const spare = searchGrids.spare;
  for (const g of [corr.q, corr.raw]) {
    if (!g || g === keep?.q || g === keep?.raw || spare.includes(g)) continue;
    spare.push(g);
  }
  let bytes = 0;
  for (const g of spare) bytes += g.byteLength;
  while (bytes > SPARE_BYTES) bytes -= spare.shift()!.byteLength;
}

/** Residual and exceptions of a pointwise candidate. */
export interface Correction {
  /** The centre the candidate reconstructs around (the tile's, or one on its lattice). */
  center: number;
  step: number;
  q: Int32Array | null;
  /** The predictor of the residual codes (reconstruct.ts Predictor). */
  predictor: number;
  exceptions: number[];
  /** The coded stream of q, when the predictor choice already made it. */
  coded?: Uint8Array;
  /** The residual codes before prediction (missing cells 0), and the rough bits of the chosen prediction's differences: for {@link blendVariant}. */
  raw?: Int32Array;
  bits?: number;
  /** The non-zero entries of q, where the check counted them (otherwise they are counted in q). */
  nonzero?: number;
  /**
   * True while q holds the codes before prediction (raw) rather than the
   * predictor's differences: the search forms them ({@link formed}) only
   * for the candidates it codes.
   */
  deferred?: boolean;
}

/** A grid of `cells` codes from `search`'s spare ones (the last given back first), or a new one. */
function spareGrid(search: SearchScratch | null, cells: number): Int32Array {
  const spare = search?.spare ?? [];
  for (let k = spare.length - 1; k >= 0; k--) if (spare[k].length === cells) return spare.splice(k, 1)[0];
  return new Int32Array(cells);
}

/**
 * `corr` with its predictor's differences formed where they were deferred,
 * into one of the search's spare code grids (every cell is written) rather
 * than a new one: of a 1024 x 1024 tile of bench/'s large field, a new grid
 * took as long as the predictor's kernel.
 */
export function formed(t: PreparedTile, corr: Correction): Correction {
  if (!corr.deferred || !corr.raw) return corr;
  return { ...corr, q: predict(corr.raw, t.m, t.n, MAX_INT, corr.predictor, spareGrid(searchGrids, t.m * t.n))!, deferred: false };
}

/**
 * Write a LowRank payload: the fixed part, the mask section, the factor
 * block (the right factor's step code, then per group its left step codes
 * and one coded integer stream of its factor codes), the residual (step
 * unless it is the field's, then one coded stream over the tile's valid
 * cells) and the exceptions section (DEFLATE).
 */
export function lowRankPayload(t: PreparedTile, f: Factors | null, given: Correction | null): Uint8Array {
  // The residual stream is the same in both forms below: coded once.
  const corr = given?.q && !given.coded && f && f.rank > 0 ? { ...given, coded: encodeInts(given.q, t.m, t.n, t.classes.special > 0 ? t.classes.codes : null) } : given;
  // Plain codes always fit (every code is within +-2^30).
  const plain = lowRankWith(t, f, corr, false)!;
  if (!f || f.rank === 0) return plain;
  // Factor codes as they are, or as differences along each vector (smooth factors), whichever is smaller.
  const delta = lowRankWith(t, f, corr, true);
  return delta !== null && delta.length < plain.length ? delta : plain;
}

/** The group's factor codes as one row (left factor k, right factor k, left k+1, ...), differenced if asked; null if a difference leaves +-2^30. */
function factorRow(f: Factors, k0: number, size: number, m: number, n: number, delta: boolean): Int32Array | null {
  const row = new Int32Array(size * (m + n));
  let at = 0;
  for (let k = k0; k < k0 + size; k++) {
    at = putFactor(row, at, f.qu, k * m, m, delta);
    if (at >= 0) at = putFactor(row, at, f.qw, k * n, n, delta);
    if (at < 0) return null;
  }
  return row;
}

/**
 * Codes v[from .. from + len) into row from `at`, differenced if asked:
 * the next position, or -1 if a difference leaves +-2^30 (a module
 * function over the arrays, not a closure made per row: the profile of a
 * pack of bench/'s large field put 62 ms in the closure's version).
 */
function putFactor(row: Int32Array, at: number, v: Int32Array, from: number, len: number, delta: boolean): number {
  let prev = 0;
  for (let i = from; i < from + len; i++) {
    const d = delta ? v[i] - prev : v[i];
    if (d > MAX_INT || d < -MAX_INT) return -1;
    row[at++] = d;
    prev = v[i];
  }
  return at;
}

function lowRankWith(t: PreparedTile, f: Factors | null, corr: Correction | null, delta: boolean): Uint8Array | null {
  const { m, n } = t;
  const rank = f ? f.rank : 0;
  let flags = 0;
  if (t.maskSection.length > 0) flags |= Flag.Mask;
  const hasResidual = corr !== null && corr.q !== null;
  if (hasResidual) flags |= Flag.Residual;
  if (corr !== null && corr.exceptions.length > 0) flags |= Flag.Exceptions;
  if (delta) flags |= Flag.FactorDelta;
  const w = new ByteWriter(64 + t.maskSection.length + (hasResidual ? (m * n) / 2 : 0) + (f ? rank * (m + n) : 0));
  const center = corr !== null ? corr.center : t.center;
  const cf = centreForm(center);
  flags |= cf.form << CENTRE_FORM_SHIFT;
  w.u8(Method.LowRank);
  w.u8(flags);
  w.varint(rank);
  if (cf.form === CentreForm.Binary32) w.f32(center);
  else if (cf.form === CentreForm.Binary64) w.f64(center);
  else w.svarint(cf.k);
  if (flags & Flag.Mask) w.bytes(t.maskSection);
  if (f && rank > 0) {
    const sizes = groupSizes(rank, t.grouping);
    w.u8(sizes.length);
    for (const size of sizes) w.varint(size);
    w.svarint(f.codeW);
    let k0 = 0;
    for (const size of sizes) {
      for (let k = k0; k < k0 + size; k++) w.svarint(f.codeU[k] - (k > 0 ? f.codeU[k - 1] : 0));
      const row = factorRow(f, k0, size, m, n, delta);
      if (row === null) return null;
      const coded = encodeInts(row, 1, row.length, null);
      w.varint(coded.length);
      w.bytes(coded);
      k0 += size;
    }
  }
  if (hasResidual && corr.q) {
    // The residual byte (predictor, step form), then the step unless it is the field's.
    const sf = stepForm(corr.step, t.fieldStep);
    w.u8(corr.predictor | (sf << STEP_FORM_SHIFT));
    if (sf === StepForm.Binary32) w.f32(corr.step);
    else if (sf === StepForm.Binary64) w.f64(corr.step);
    else if (sf === StepForm.Integer) w.varint(corr.step);
    const coded = corr.coded ?? encodeInts(corr.q, m, n, t.classes.special > 0 ? t.classes.codes : null);
    w.varint(coded.length);
    w.bytes(coded);
  }
  if (corr !== null && corr.exceptions.length > 0) {
    const width = t.dtype === 'f32' ? 4 : 8;
    const src = new Uint8Array(t.orig.buffer, t.orig.byteOffset, t.orig.byteLength);
    const sec = new ByteWriter(4 + corr.exceptions.length * (4 + width));
    sec.u32(corr.exceptions.length);
    for (const c of corr.exceptions) sec.u32(c);
    for (const c of corr.exceptions) sec.bytes(src.subarray(c * width, c * width + width));
    writeSection(w, sec.view8());
  }
  return w.finish();
}

/**
 * How ranks are grouped into separately compressed factor groups, each a
 * point where a progressive reader may stop: 'one' keeps all ranks in one
 * group; 'doubling' cuts after ranks 1, 2, 4, 8, ... Measured on the bench
 * fields, 'doubling' costs 10-30% more bytes at psnr:40/60 with 64x64
 * tiles, so it is an option (PackOptions.progressive), not the default.
 */
export function groupSizes(rank: number, grouping: 'one' | 'doubling'): number[] {
  if (grouping === 'one' || rank <= 1) return [rank];
  const out: number[] = [];
  let done = 0;
  for (let next = 1; done < rank; next *= 2) {
    const end = Math.min(rank, next);
    if (end > done) out.push(end - done);
    done = end;
  }
  return out;
}

/** Sum of bit lengths of |v|: a cheap stand-in for coded size, to pick a predictor. */
function roughBits(v: Int32Array): number {
  let s = 0;
  for (let i = 0; i < v.length; i++) {
    const a = v[i] < 0 ? -v[i] : v[i];
    s += 32 - Math.clz32(a);
  }
  return s;
}

export { roundHalfUp } from './settle.js';

/**
 * The residual of a candidate against the pointwise bound e, computed with the
 * decoder's own arithmetic, and the cells that still fail (stored exactly).
 * The step is 2e, or `step` when given (with `center`, for lattice candidates).
 * With `search` (the pointwise search's), its spare code grids are taken
 * for the codes instead of a new one, and, without the blend, the chosen
 * predictor's differences are left to {@link formed} where the check
 * counted their non-zero entries.
 */
export function correct(t: PreparedTile, f: Factors | null, e: number, step = binary32Below(2 * e), center = t.center, blendToo = true, search: SearchScratch | null = null): Correction {
  const { m, n } = t;
  const cells = m * n;
  const codes = t.classes.codes;
  let q: Int32Array | null = null;
  let predictor: number = Predictor.None;
  let coded: Uint8Array | undefined;
  let raw: Int32Array | undefined;
  let rawBits: number | undefined;
  let nonzero: number | undefined;
  let deferred: boolean | undefined;
  const exceptions: number[] = [];
  // The reconstruction of a valid cell is the decoder's withResidual() of its low-rank part and its own
  // code, rounded to the dtype as reconstruct() stores it (the predictor changes only the coded
  // differences, and missing cells are not checked): so each cell is checked as its code is chosen
  // (./settle.ts).
  const checked = e > 0 && Number.isFinite(step);
  if (checked) {
    // Every cell of q is written: a grid a candidate gave back will do.
    q = spareGrid(search, cells);
    // Without missing cells, the plain predictors' bits are summed row by row as the codes are settled.
    const sums = t.classes.special > 0 ? null : new Float64Array(PREDICTOR_SUMS);
    const settled = settleCodes(t, f, center, e, step, q, exceptions, sums);
    if (!settled.any) {
      search?.spare.push(q);
      q = null;
    } else {
      // The predictor whose residual looks cheapest. Missing cells take the value the
      // predictor expects, so they cost nothing (the decoder overwrites them anyway).
      let best = q;
      let bestBits = settled.bits;
      let blend: Int32Array | null = null;
      // Without missing cells, only the winner's differences are formed; with them, each predictor
      // fills the missing cells its own way.
      const plain = sums === null ? null : predictorBitsOf(settled.sumsOk ? sums : null);
      // With missing cells, the plain predictors' rough bits from the kernels where they are to be had (each
      // predictor's filled codes and differences walked, not kept): the chosen one's differences are formed after.
      const masked = plain === null ? maskedPredictorBits(q, codes, m, n) : null;
      let unformed = false;
      for (const kind of PREDICTORS) {
        if (kind === Predictor.Blend && !blendToo) continue;
        if (plain !== null && kind !== Predictor.Blend) {
          if (plain[kind - 1] < bestBits) {
            bestBits = plain[kind - 1];
            predictor = kind;
          }
          continue;
        }
        if (masked !== null && kind !== Predictor.Blend) {
          // -1: a difference passes the limit (predict() gives null).
          const bits = masked[kind - 1];
          if (bits >= 0 && bits < bestBits) {
            bestBits = bits;
            predictor = kind;
            unformed = true;
          }
          continue;
        }
        const qp = t.classes.special > 0 ? predictedFill(q, codes, m, n, MAX_INT, kind) : q;
        const d = predict(qp, m, n, MAX_INT, kind);
        if (!d) continue;
        const bits = roughBits(d);
        if (!(bits < bestBits)) continue;
        if (kind === Predictor.Blend) blend = d;
        else {
          best = d;
          bestBits = bits;
          predictor = kind;
        }
      }
      if (unformed) best = predict(predictedFill(q, codes, m, n, MAX_INT, predictor), m, n, MAX_INT, predictor)!;
      if (plain !== null && settled.nonzero !== null) nonzero = settled.nonzero[predictor === Predictor.None ? 5 : predictor - 1];
      if (plain !== null && predictor !== Predictor.None) {
        if (search !== null && !blendToo && nonzero !== undefined) deferred = true;
        else best = predict(q, m, n, MAX_INT, predictor)!;
      }
      if (blend !== null) {
        // The blend looks cheaper, but it decodes several times slower than the others and
        // bit lengths are only an estimate: both are coded, and the blend must save 1%.
        const mask = t.classes.special > 0 ? codes : null;
        const other = encodeInts(best, m, n, mask);
        const mine = encodeIntsWithin(blend, m, n, mask, blendAtMost(other));
        if (mine !== null && mine.length < BLEND_MARGIN * other.length) {
          best = blend;
          predictor = Predictor.Blend;
          coded = mine;
        } else coded = other;
      }
      raw = q;
      rawBits = bestBits;
      q = best;
    }
  }
  // No residual (e <= 0, or a step that is not finite): the low-rank part alone.
  return { center, step, q, predictor, exceptions: checked ? exceptions : unsettledCells(t, f, center, e), coded, raw, bits: rawBits, nonzero, deferred };
}

/**
 * The payload of a candidate whose residual was chosen without the blend
 * (`corr`, from correct() with blendToo false), with its residual coded
 * with the blend instead when that is what correct() with the blend
 * allowed would choose: the blend's differences have fewer rough bits than
 * the chosen predictor's, and its coded stream is at least 1% shorter.
 * Null when it would keep the other predictor (the payload is then the
 * candidate's own). The reconstruction, and so the exceptions, do not
 * depend on the predictor: only valid cells' codes are checked, and they
 * are the same codes.
 */
export function blendVariant(t: PreparedTile, f: Factors | null, corr: Correction): Coded | null {
  if (!corr.raw || corr.q === null || corr.bits === undefined) return null;
  const { m, n } = t;
  const mask = t.classes.special > 0 ? t.classes.codes : null;
  // The differences in the tile's scratch grid (most tiles keep the other predictor), copied out when kept.
  const d = blendScratch(t);
  if (!blendDifferences(corr.raw, mask, m, n, MAX_INT, d) || !(roughBits(d) < corr.bits)) return null;
  const other = corr.coded ?? encodeInts(corr.q, m, n, mask);
  const mine = encodeIntsWithin(d, m, n, mask, blendAtMost(other));
  if (mine === null || !(mine.length < BLEND_MARGIN * other.length)) return null;
  const kept = d.slice();
  return { payload: lowRankPayload(t, f, { ...corr, q: kept, predictor: Predictor.Blend, coded: mine }), codes: kept };
}

/** Each tile's scratch grid for {@link blendVariant}'s differences (overwritten by each use, kept by none). */
const blendGrids = new WeakMap<PreparedTile, Int32Array>();

function blendScratch(t: PreparedTile): Int32Array {
  let d = blendGrids.get(t);
  if (d === undefined) {
    d = new Int32Array(t.m * t.n);
    blendGrids.set(t, d);
  }
  return d;
}

/**
 * The longest blend stream that is below BLEND_MARGIN times the other
 * predictor's stream `other` (whole bytes: a stream of ceil(BLEND_MARGIN x
 * other.length) bytes or more is not), for {@link encodeIntsWithin}.
 */
function blendAtMost(other: Uint8Array): number {
  return Math.ceil(BLEND_MARGIN * other.length) - 1;
}

/**
 * The factors of rank r that the pointwise search quantizes for bound e,
 * or null: rounding noise per cell of (FACTOR_NOISE e)^2 from each factor,
 * r c^2 / (12 n) and r dw^2 / (12 m).
 */
export function pointwiseFactors(t: PreparedTile, r: number, e: number): Factors | null {
  const { m, n } = t;
  if (!(r > 0 && r <= Math.min(m, n))) return null;
  const dw = FACTOR_NOISE * e * Math.sqrt((12 * m) / r);
  const c = FACTOR_NOISE * e * Math.sqrt((12 * n) / r);
  return quantizeFactors(t, r, c, dw);
}

/** A payload and the grid its residual stream codes (null without a residual), for {@link withResidualCoder}. */
export interface Coded {
  payload: Uint8Array;
  codes: Int32Array | null;
}

/**
 * The symbol coder (./code-symbols.ts) is kept for a dense residual when
 * its stream is at most this factor of the binary coder's: it decodes 2-3x
 * faster there (scratch measurement on the bench fields' residuals, issue
 * 9), which is worth a share of a byte in a hundred.
 */
export const SYMBOLS_MARGIN = 1.01;

/**
 * A finished payload with its residual stream coded by the coder that suits
 * it (spec/FORMAT.md 19): the symbol coder when at least half the coded
 * values are non-zero and its stream is at most 1% longer than the binary
 * coder's, otherwise the shorter of the two, the binary coder on a tie.
 * Only the final payload of a tile is re-coded: the rank and predictor
 * search costs its candidates with the binary coder. The payload is
 * returned as it is when it has no residual or keeps the binary coder.
 * `given` is the grid the residual stream codes, when the caller has it
 * (otherwise it is decoded from the stream).
 */
export function withResidualCoder(t: PreparedTile, payload: Uint8Array, given: Int32Array | null = null): Uint8Array {
  const place = residualPlace(payload);
  if (place === null || (payload[place.byteAt] & RESIDUAL_SYMBOLS) !== 0) return payload;
  const { m, n } = t;
  const mask = t.classes.special > 0 ? t.classes.codes : null;
  const binary = payload.subarray(place.streamAt, place.streamEnd);
  // The grid the binary stream codes: the encoder's own when it has it, else read back from the stream.
  let d = given;
  if (d === null) {
    d = new Int32Array(m * n);
    decodeInts(binary, m, n, mask, d);
  }
  let coded = 0;
  let nonzero = 0;
  for (let c = 0; c < d.length; c++) {
    if (mask !== null && mask[c] !== Cell.Valid) continue;
    coded++;
    if (d[c] !== 0) nonzero++;
  }
  const dense = 2 * nonzero >= coded;
  // Kept when shorter than the binary stream, or when dense and at most SYMBOLS_MARGIN times as long: beyond that, its coding stops.
  const symbols = encodeSymbolsWithin(d, m, n, mask, dense ? SYMBOLS_MARGIN * binary.length : binary.length - 1);
  if (symbols === null || !(symbols.length < binary.length || (dense && symbols.length <= SYMBOLS_MARGIN * binary.length))) return payload;
  const w = new ByteWriter(payload.length + 16);
  w.bytes(payload.subarray(0, place.lengthAt));
  w.varint(symbols.length);
  w.bytes(symbols);
  w.bytes(payload.subarray(place.streamEnd));
  const out = w.finish();
  out[place.byteAt] |= RESIDUAL_SYMBOLS;
  return out;
}

/** Share of the bound given to factor quantization noise (tuned in bench/). */
export const FACTOR_NOISE = 0.25;

/** The tile's values as stored raw. */
export function rawBytes(t: PreparedTile): number {
  return t.m * t.n * (t.dtype === 'f32' ? 4 : 8);
}

/**
 * Below this share of the tile's raw bytes, the best lossy payload is kept
 * without coding the exact one: DEFLATE of byte planes rarely gets a float
 * tile below half its size when a lossy coding does not, and coding it for
 * every tile cost 11-15% of the encoding time (measured with a profile of
 * packing a 672 x 720 field; common practice, no source, for the share).
 */
export const EXACT_GATE = 0.5;

/** `best`, or the exact payload when `best` is large enough that exact storage may be smaller, and it is. */
export function orExact(t: PreparedTile, best: Uint8Array): Uint8Array {
  if (best.length < EXACT_GATE * rawBytes(t)) return best;
  const exact = exactPayload(t);
  return exact.length < best.length ? exact : best;
}

/** A rank-r payload with no residual (L2 modes), or the exact one if smaller. */
export function encodeL2(t: PreparedTile, r: number, c: number, dw: number): Uint8Array {
  if (!t.finite) return exactPayload(t);
  let f: Factors | null = null;
  if (r > 0 && t.valid > 0) {
    f = quantizeFactors(t, Math.min(r, t.m, t.n), c, dw);
    if (!f) return exactPayload(t);
  }
  return orExact(t, lowRankPayload(t, f, null));
}
