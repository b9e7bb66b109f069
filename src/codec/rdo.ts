/**
 * Residuals for a mean squared error allotment (L2 bounds): codes chosen
 * for rate as well as distortion, and the search over steps, rate weights
 * and predictors that picks the smallest payload.
 */
import type { FloatArray } from '../types.js';
import { addLayer } from './layer.js';
import { Cell } from './mask.js';
import type { PreparedTile } from './prepare.js';
import { blendWeights, interior, lowRank, Predictor, walkPredictor } from './reconstruct.js';
import { MAX_INT } from './section.js';
import { binary32Below } from './steps.js';
import { RdoWalks, type LaneWalk } from '../wasm/rdo.js';
import { correct, lowRankPayload, type Coded, type Factors } from './tile-encode.js';

/** Step multipliers and rate weights (in units of step^2) the rate-distortion search tries. */
const RDO_STEPS = [0.6, 0.7, 0.85, 1];
const RDO_WEIGHTS = [0.15, 0.3, 0.45, 0.6];

/**
 * Of the steps and weights the rate-distortion search tries, how many (those
 * whose codes have the fewest rough bits) are coded for real: coding every
 * one cost most of an L2 pack's time. With 3, the third was never the
 * smallest on the 114 archives of `npm run digest` (the same archives with
 * 2); with 1, two of them grew by 2 and 4 bytes. Measured for issue 10.
 */
const RDO_CODED = 2;

/**
 * The search's payload was at least 1.11 times the rough bits / 8 of plain
 * rounding's codes (those of correct() at the search's unit step) on every
 * one of the 1152 tiles that the L2 plans of `npm run digest` searched at
 * rank 0 (measured; about 2.3 times as a rule, the rough bits leave out
 * signs and zero flags). So where GIVE_UP times that figure reaches what
 * the caller already has, the search is not run: half of the least measured
 * ratio is the margin. On a 1024 x 1024 tile of bench/'s large field at
 * psnr:80 the rank-0 search took 0.94 s for a payload 11 times the pointwise
 * coder's.
 */
const GIVE_UP = 0.5;

/**
 * After the first candidate coded, a candidate is coded only when its rough
 * bits times the bytes a rough bit of that first one took stays within
 * this factor of the payload it must beat (the caller's `atMost`, or the
 * smallest so far). On the rank-0 searches of `npm run digest` (1009,
 * every candidate's rough bits and bytes logged; measured, issue 10) the
 * rule with 1.1 leaves 1938 of 3543 such candidates uncoded and changes
 * no search's result where it won; with 1.0 nine would have changed (50
 * bytes).
 */
const PREDICTED_MARGIN = 1.1;

/** Differences whose rough bits are looked up rather than computed (a 32 KiB table). */
const DIFF_TABLE = 1 << 12;
let diffTable: Float64Array | null = null;

/** Rough bits of a prediction difference, for the rate-distortion search: 1 for 0, else 3 + 2 log2 |d| (looked up below DIFF_TABLE: the same values). */
function diffBits(d: number): number {
  const a = d < 0 ? -d : d;
  return a < DIFF_TABLE ? bitsTable()[a] : 3 + 2 * Math.log2(a);
}

/** The table of {@link diffBits} below DIFF_TABLE (built once). */
export function bitsTable(): Float64Array {
  if (diffTable === null) {
    diffTable = new Float64Array(DIFF_TABLE);
    diffTable[0] = 1;
    for (let k = 1; k < DIFF_TABLE; k++) diffTable[k] = 3 + 2 * Math.log2(k);
  }
  return diffTable;
}

/**
 * One walk of the search: the codes of a predictor at one step and rate
 * weight. settle() chooses a cell's code knowing its prediction p: the
 * nearest code, or the next one towards p when that lowers (error /
 * step)^2 + w x bits of the difference; it records the difference in `d`
 * and sums the squared error and the rough bits.
 */
export class RdoWalk {
  se = 0;
  bits = 0;
  constructor(
    readonly orig: FloatArray,
    readonly base: Float64Array,
    readonly codes: Uint8Array,
    readonly d: Int32Array,
    readonly step: number,
    readonly w: number,
  ) {}

  settle(c: number, p: number): number {
    if (this.codes[c] !== Cell.Valid) return Math.abs(p) <= MAX_INT ? p : Number.NaN;
    const x = (this.orig[c] - this.base[c]) / this.step;
    let v = Math.round(x);
    if (v !== p) {
      const alt = v + (p > v ? 1 : -1);
      const w = this.w;
      if ((x - alt) * (x - alt) + w * diffBits(alt - p) < (x - v) * (x - v) + w * diffBits(v - p)) v = alt;
    }
    if (Math.abs(v) > MAX_INT || Math.abs(v - p) > MAX_INT) return Number.NaN;
    this.d[c] = v - p;
    this.bits += diffBits(v - p);
    this.se += (x - v) * (x - v) * this.step * this.step;
    return v;
  }

  /**
   * Walk the tile in raster order with predictor `kind` (q: scratch for the
   * codes); false if a code leaves the code range, or as soon as the squared
   * error passes `seLimit` or the rough bits pass `bitsLimit` (both only
   * grow, so such a walk could not end within them). The predictors other
   * than the blend are walked here with their predictions inline, the same
   * ones {@link walkPredictor} gives, so that settle() is a direct call.
   */
  run(q: Int32Array, m: number, n: number, kind: number, seLimit: number, bitsLimit: number, floor: RowFloor): boolean {
    if (floor.cannotFit(0, 0, 0, seLimit, bitsLimit)) return false;
    if (kind === Predictor.Blend) {
      return walkPredictor(q, m, n, kind, (c, p) => {
        const v = this.settle(c, p);
        return this.se > seLimit || this.bits > bitsLimit ? Number.NaN : v;
      });
    }
    // settle() inline, with the sums in locals: the same operations in the same order.
    const { orig, base, codes, d, step, w } = this;
    const table = bitsTable();
    let se = this.se;
    let bits = this.bits;
    for (let i = 0; i < m; i++) {
      for (let j = 0; j < n; j++) {
        const c = i * n + j;
        const p = kind === Predictor.None ? 0 : i === 0 ? (j === 0 ? 0 : q[c - 1]) : j === 0 ? q[c - n] : interior(kind, q[c - 1], q[c - n], q[c - n - 1]);
        if (codes[c] !== Cell.Valid) {
          if (!(Math.abs(p) <= MAX_INT)) return false;
          q[c] = p;
          continue;
        }
        const x = (orig[c] - base[c]) / step;
        let v = Math.round(x);
        let dv = v - p;
        if (dv !== 0) {
          const alt = v + (p > v ? 1 : -1);
          const da = alt - p;
          const bitsAlt = (da < 0 ? -da : da) < DIFF_TABLE ? table[da < 0 ? -da : da] : diffBits(da);
          const bitsV = (dv < 0 ? -dv : dv) < DIFF_TABLE ? table[dv < 0 ? -dv : dv] : diffBits(dv);
          if ((x - alt) * (x - alt) + w * bitsAlt < (x - v) * (x - v) + w * bitsV) {
            v = alt;
            dv = da;
          }
        }
        if (Math.abs(v) > MAX_INT || Math.abs(dv) > MAX_INT) return false;
        d[c] = dv;
        bits += (dv < 0 ? -dv : dv) < DIFF_TABLE ? table[dv < 0 ? -dv : dv] : diffBits(dv);
        se += (x - v) * (x - v) * step * step;
        q[c] = v;
      }
      if (se > seLimit || bits > bitsLimit || floor.cannotFit(i + 1, se, bits, seLimit, bitsLimit)) return false;
    }
    this.se = se;
    this.bits = bits;
    return true;
  }
}

/** Relative slack of {@link RowFloor}'s test, far above the rounding of its sums (about cells x 2^-53). */
const FLOOR_SLACK = 1e-6;
/** What RowFloor's sums are taken at (the kernels are handed the same value). */
export const FLOOR_KEEP = 1 - FLOOR_SLACK;

/**
 * What the rows from row i to the end add at least to a walk of predictor
 * `kind` at one step: squared error, the nearest code's per cell (settle()
 * only ever moves a code away from x, by one, which cannot lower |x - v|),
 * and rough bits. settle() gives a valid cell the nearest code v0 or the
 * next one towards its prediction, so a walk that passes a cell (every code
 * within MAX_INT, or it returns false) has its code in [v0 - 1, v0 + 1]
 * clipped to +-MAX_INT, and a cell that is not Valid the code of its
 * prediction; the plain predictors are non-decreasing in the left and up
 * codes and, where they use it (Lorenzo, the median), non-increasing in the
 * up-left one, so row by row these intervals give each prediction's
 * interval, and a cell's rough bits are at least diffBits of the distance
 * between its code's interval and its prediction's (diffBits grows with
 * |d|). The blend's prediction is not bounded here: 1 a valid cell
 * (diffBits(0), the least). A walk whose sums plus these pass its limits
 * could not end within them, so it stops there: the same walks end within
 * their limits as without the test (the slack covers rounding in the sums,
 * at least 1e-6 of a bit a cell), and most walks at too coarse a step stop
 * before their first row. Against 1 a valid cell for every predictor, the
 * bits' floor let the 50 walks of the plain predictor that the rough bits
 * cut short in a pack of bench/'s turbulence field at psnr:80 stop after
 * 2930 rows instead of 14664 of their 15360 (scratch/lb-proto.mjs,
 * measured for issue 10): the 40 at steps finer than the second-ranked
 * candidate's stop before their first row (their floor alone, 98% of the
 * bits of a walk that runs to its end there, passes the limit), the 10 at
 * its step still run most of the way. The blend as the plain predictor
 * (vega-datasets annual-precip at psnr:80) gains little: a floor from the
 * hull of its five parts' intervals would have cut its 18 such walks after
 * 2610 rows instead of 2657 of 3024 (the same scratch), and is not made.
 */
export class RowFloor {
  /**
   * restSe[i], restBits[i], restValid[i]: over rows i .. m - 1 (entry m is
   * 0), restValid the valid cells (the rough bits' floor for any
   * predictor); computed by the kernels (src/wasm/rdo.ts) or by
   * {@link RowFloor.of}.
   */
  constructor(
    readonly restSe: Float64Array,
    readonly restBits: Float64Array,
    readonly restValid: Float64Array,
  ) {}

  /**
   * These sums with 1 rough bit a valid cell: the floor of a walk of any
   * predictor at this step. The search walks the predictors other than the
   * plain one once a tile each, and most of those walks end within their
   * limits (all 15 in a pack of bench/'s turbulence field at psnr:80), so
   * a pass for their own bits' floor would mostly be lost.
   */
  anyPredictor(): RowFloor {
    return new RowFloor(this.restSe, this.restValid, this.restValid);
  }

  /** The sums at `step` for predictor `kind`, computed here (the kernels' rowFloor computes the same, in the same order). */
  static of(orig: FloatArray, base: Float64Array, codes: Uint8Array, m: number, n: number, step: number, kind: number): RowFloor {
    const restSe = new Float64Array(m + 1);
    const restBits = new Float64Array(m + 1);
    const restValid = new Float64Array(m + 1);
    const table = bitsTable();
    const bounded = kind !== Predictor.Blend;
    // The codes' intervals of the row above, replaced cell by cell with this row's (lo[j - 1] is this row's left neighbour).
    const lo = new Float64Array(n);
    const hi = new Float64Array(n);
    for (let i = 0; i < m; i++) {
      let se = 0;
      let bits = 0;
      let valid = 0;
      // Up-left's interval (row i - 1, column j - 1), kept as lo[j - 1] is replaced.
      let ulLo = 0;
      let ulHi = 0;
      for (let j = 0; j < n; j++) {
        const c = i * n + j;
        const upLo = lo[j];
        const upHi = hi[j];
        let pLo = 0;
        let pHi = 0;
        if (bounded && kind !== Predictor.None && c !== 0) {
          if (i === 0) [pLo, pHi] = [lo[j - 1], hi[j - 1]];
          else if (j === 0) [pLo, pHi] = [upLo, upHi];
          else [pLo, pHi] = [interior(kind, lo[j - 1], upLo, ulHi), interior(kind, hi[j - 1], upHi, ulLo)];
        }
        ulLo = upLo;
        ulHi = upHi;
        if (codes[c] !== Cell.Valid) {
          lo[j] = pLo < -MAX_INT ? -MAX_INT : pLo > MAX_INT ? MAX_INT : pLo;
          hi[j] = pHi > MAX_INT ? MAX_INT : pHi < -MAX_INT ? -MAX_INT : pHi;
          continue;
        }
        // The same arithmetic as settle()'s error of its nearest code.
        const x = (orig[c] - base[c]) / step;
        const v = Math.round(x);
        se += (x - v) * (x - v) * step * step;
        valid++;
        if (!bounded || !(Math.abs(v) <= MAX_INT + 1)) {
          // A walk through a code beyond MAX_INT + 1 returns false there: any interval will do.
          bits += 1;
          lo[j] = -MAX_INT;
          hi[j] = MAX_INT;
          continue;
        }
        const vLo = v - 1 < -MAX_INT ? -MAX_INT : v - 1;
        const vHi = v + 1 > MAX_INT ? MAX_INT : v + 1;
        const dist = vLo > pHi ? vLo - pHi : pLo > vHi ? pLo - vHi : 0;
        bits += dist < DIFF_TABLE ? table[dist] : diffBits(dist);
        lo[j] = vLo;
        hi[j] = vHi;
      }
      restSe[i] = se;
      restBits[i] = bits;
      restValid[i] = valid;
    }
    for (let i = m - 1; i >= 0; i--) {
      restSe[i] = restSe[i + 1] + restSe[i];
      restBits[i] = restBits[i + 1] + restBits[i];
      restValid[i] = restValid[i + 1] + restValid[i];
    }
    return new RowFloor(restSe, restBits, restValid);
  }

  /** Whether a walk with sums se and bits after its first i rows must pass seLimit or bitsLimit by its end. */
  cannotFit(i: number, se: number, bits: number, seLimit: number, bitsLimit: number): boolean {
    const keep = FLOOR_KEEP;
    return se + keep * this.restSe[i] > seLimit || bits + keep * this.restBits[i] > bitsLimit;
  }
}

/**
 * A payload for a mean squared error allotment (L2 bounds): the factors `f`
 * (none: rank 0) and a residual whose codes are chosen for rate as well as
 * distortion: in raster order each code is the nearest one, or the next
 * one towards its prediction when that lowers (error / step)^2 + w x bits
 * of the difference (greedy rate-distortion optimised quantization; the
 * usual Lagrangian trade, e.g. Sullivan and Wiegand, "Rate-distortion
 * optimization for video compression", IEEE Signal Processing Magazine
 * 15(6), 1998). Finer steps with such codes meet the same error in fewer
 * bytes than uniform rounding at low rates. Steps and weights are tried
 * with the predictor plain rounding picks, then Lorenzo, the median and the
 * blend at the best of them. Returns the smallest payload whose estimated
 * squared error stays within 98% of `mse` per valid cell, or null. A payload
 * of `atMost` bytes or more is of no use to the caller: the search gives up
 * (null) before its walks when plain rounding's codes already point to one
 * (see {@link GIVE_UP}), and codes no candidate after the first whose rough
 * bits point to one, or to more than the smallest so far (see
 * {@link PREDICTED_MARGIN}).
 */
export function residualForMse(t: PreparedTile, f: Factors | null, mse: number, atMost = Infinity): Uint8Array | null {
  return residualForMseCoded(t, f, mse, atMost)?.payload ?? null;
}

/** {@link residualForMse} with the grid its residual stream codes (for withResidualCoder in ./tile-encode.ts: not decoded again). */
export function residualForMseCoded(t: PreparedTile, f: Factors | null, mse: number, atMost = Infinity): Coded | null {
  if (!t.finite || t.valid === 0 || !(mse > 0) || !Number.isFinite(mse)) return null;
  const { m, n } = t;
  const cells = m * n;
  const center = t.center;
  // What the residual corrects: the decoder's own low-rank part and centre.
  const base = new Float64Array(cells);
  if (f) lowRank(f.l, f.w, m, n, f.rank, center, base);
  else lowRank(new Float64Array(0), new Float64Array(0), m, n, 0, center, base);
  if (t.layer) addLayer(base, t.layer, cells);
  const seLimit = 0.98 * mse * t.valid;
  // No residual at all is the smallest payload these factors can make: taken as it is when it fits.
  if (zeroResidualFits(t, base, seLimit)) return { payload: lowRankPayload(t, f, { center, step: 0, q: null, predictor: Predictor.None, exceptions: [] }), codes: null };
  const unit = Math.sqrt(12 * mse);
  const plain = correct(t, f, unit / 2, unit);
  if (plain.bits !== undefined && (plain.bits / 8) * GIVE_UP >= atMost) return null;
  const plainKind = plain.predictor;
  const q = new Int32Array(cells);
  /**
   * The codes of predictor `kind` at step a x unit and weight w (their differences in d), with their
   * rough bits; null if they miss the allotment, leave the code range or (cut short) have more rough
   * bits than `bitsLimit`.
   */
  // RowFloor's sums by step, for the plain predictor.
  const floors = new Map<number, RowFloor>();
  const floorAt = (step: number, walks: RdoWalks | null): RowFloor => {
    let floor = floors.get(step);
    if (floor === undefined) {
      const sums = walks?.floor(step, plainKind);
      floors.set(step, (floor = sums ? new RowFloor(sums.restSe, sums.restBits, sums.restValid) : RowFloor.of(t.orig, base, t.classes.codes, m, n, step, plainKind)));
    }
    return floor;
  };
  // With `walks` (the tile laid out in the kernels), a walk runs there: its differences are then left there
  // (`kernel` true) for the caller to take where it keeps them.
  const walk = (kind: number, a: number, w: number, d: Int32Array, bitsLimit: number, walks: RdoWalks | null): { step: number; bits: number; kernel: boolean } | null => {
    const step = binary32Below(a * unit);
    let floor = floorAt(step, walks);
    if (kind !== plainKind) floor = floor.anyPredictor();
    if (walks !== null) {
      const r = walks.walk(kind, step, w, seLimit, bitsLimit, FLOOR_KEEP, floor);
      // null: a value the kernel does not take (NaN), walked below.
      if (r !== null) return r !== false && r.se <= seLimit ? { step, bits: r.bits, kernel: true } : null;
    }
    d.fill(0);
    const run = new RdoWalk(t.orig, base, t.classes.codes, d, step, w);
    return run.run(q, m, n, kind, seLimit, bitsLimit, floor) && run.se <= seLimit ? { step: run.step, bits: run.bits, kernel: false } : null;
  };
  let best: Uint8Array | null = null;
  // The grid best's residual stream codes (null: it has none).
  let bestCodes: Int32Array | null = null;
  let bestAt: [number, number] = [1, 0];
  // Bytes a rough bit of the first candidate coded took (see PREDICTED_MARGIN).
  let perBit = 0;
  const beat = () => Math.min(atMost, best === null ? Infinity : (best as Uint8Array).length);
  const code = (kind: number, a: number, w: number, step: number, d: Int32Array, bits: number): void => {
    if (perBit > 0 && perBit * bits > PREDICTED_MARGIN * beat()) return;
    const q = d.some((v) => v !== 0) ? d : null;
    const payload = lowRankPayload(t, f, { center, step, q, predictor: kind, exceptions: [] });
    if (perBit === 0 && bits > 0) perBit = payload.length / bits;
    if (best === null || payload.length < best.length) {
      best = payload;
      bestCodes = q;
      bestAt = [a, w];
    }
  };
  // The steps and weights with the predictor plain rounding picks, ranked by the rough bits of their
  // codes, ties by their order in RDO_STEPS x RDO_WEIGHTS; the RDO_CODED cheapest are coded for real,
  // from the differences their walks left (kept as the ranking goes). Then the other predictors at the
  // best of them. The walks run coarsest step and heaviest weight first (fewest bits, most of them
  // within the allotment), so the finer ones, cut short by the third cheapest's bits, stop early; the
  // ranking does not depend on the order the walks run in.
  const ranked: { a: number; w: number; bits: number; order: number; step: number; d: Int32Array }[] = [];
  let spare: Int32Array = new Int32Array(cells);
  // The walks of the plain predictor, in the kernels where they are to be had (nothing else uses them meanwhile),
  // several weights of a step in one pass (RdoWalks.walkLanes).
  const plainWalks = RdoWalks.open(t.orig, base, t.classes.codes, m, n, bitsTable(), blendWeights(), RDO_WEIGHTS.length, plainKind === Predictor.Blend);
  // A walk whose bits pass the third cheapest's could not rank among them: cut short.
  const limit = () => (ranked.length === RDO_CODED ? ranked[RDO_CODED - 1].bits : Infinity);
  // Walks in one pass, in the kernels.
  const perPass = plainWalks?.lanes ?? 1;
  try {
    for (let ai = RDO_STEPS.length - 1; ai >= 0; ai--) {
      const a = RDO_STEPS[ai];
      const step = binary32Below(a * unit);
      for (let top = RDO_WEIGHTS.length - 1; top >= 0; top -= perPass) {
        // The weights of one pass, heaviest first, walked under the limit before the pass (see LaneWalk).
        const wis = Array.from({ length: Math.min(top + 1, perPass) }, (_, k) => top - k);
        const lanes = perPass > 1 ? plainWalks!.walkLanes(wis.map(() => plainKind), step, wis.map((wi) => RDO_WEIGHTS[wi]), seLimit, limit(), FLOOR_KEEP, floorAt(step, plainWalks)) : undefined;
        wis.forEach((wi, l) => {
          const [w, order] = [RDO_WEIGHTS[wi], ai * RDO_WEIGHTS.length + wi];
          const bitsLimit = limit();
          const lane = lanes?.[l];
          // Where the pass walked it (not null: a NaN value, walked in JavaScript), as the walk under its own limit would have ended.
          const walked =
            lane === undefined || lane === null
              ? walk(plainKind, a, w, spare, bitsLimit, lane === null ? null : plainWalks)
              : lane !== false && lane.seFloor <= seLimit && lane.bitsFloor <= bitsLimit && lane.se <= seLimit
                ? { step, bits: lane.bits, kernel: true }
                : null;
          if (walked === null) return;
          let at = ranked.length;
          while (at > 0 && (ranked[at - 1].bits > walked.bits || (ranked[at - 1].bits === walked.bits && ranked[at - 1].order > order))) at--;
          if (at >= RDO_CODED) return;
          if (walked.kernel) plainWalks!.differences(spare, l);
          ranked.splice(at, 0, { a, w, bits: walked.bits, order, step: walked.step, d: spare });
          spare = ranked.length > RDO_CODED ? ranked.pop()!.d : new Int32Array(cells);
        });
      }
    }
  } finally {
    plainWalks?.close();
  }
  for (const r of ranked) code(plainKind, r.a, r.w, r.step, r.d, r.bits);
  // The other predictors at the best step and weight (code() sets bestAt to the same); a walk whose rough bits pass
  // what code() would take is cut short (a hair over, against rounding).
  const [a, w] = bestAt;
  const codeLimit = () => (perBit > 0 ? ((PREDICTED_MARGIN * beat()) / perBit) * (1 + 1e-9) : Infinity);
  const others = [Predictor.Lorenzo, Predictor.Median, Predictor.Blend].filter((kind) => kind !== plainKind);
  const early = walkOthers(t, base, others, binary32Below(a * unit), w, seLimit, codeLimit(), (step, walks) => floorAt(step, walks).anyPredictor());
  for (const kind of others) {
    const bitsLimit = codeLimit();
    const got = early.get(kind);
    if (got !== undefined && got.walk !== null) {
      // Walked above under the limit before the first was coded: read as its walk under this limit would have ended.
      const lane = got.walk;
      if (lane !== false && lane.seFloor <= seLimit && lane.bitsFloor <= bitsLimit && lane.se <= seLimit) code(kind, a, w, binary32Below(a * unit), got.d!, lane.bits);
      continue;
    }
    // Not walked above (no kernels, or a NaN value: in JavaScript), walked now. The best's grid is kept: the walk writes elsewhere.
    if (bestCodes === spare) spare = new Int32Array(cells);
    // In the kernels, laid out for this walk alone: code() takes the kernels' memory after it.
    const walks = got === undefined ? RdoWalks.open(t.orig, base, t.classes.codes, m, n, bitsTable(), blendWeights()) : null;
    let walked: ReturnType<typeof walk> = null;
    try {
      walked = walk(kind, a, w, spare, bitsLimit, walks);
      if (walked?.kernel) walks!.differences(spare);
    } finally {
      walks?.close();
    }
    if (walked !== null) code(kind, a, w, walked.step, spare, walked.bits);
  }
  return best === null ? null : { payload: best, codes: bestCodes };
}

/**
 * The walks of the predictors `kinds` (other than the one plain rounding
 * picks) at one step and weight, in the kernels, before any of them is
 * coded: under the rough-bits limit `bitsLimit` (the one before the first
 * is coded, which later ones only tighten), the plain ones in one pass
 * (RdoWalks.walkLanes), the blend after them. By predictor, each one's
 * walk as a {@link LaneWalk} and its differences; empty without the
 * kernels (the caller walks them in turn).
 * `floorOf` gives the floor at a step (computed in the kernels held).
 */
function walkOthers(t: PreparedTile, base: Float64Array, kinds: number[], step: number, w: number, seLimit: number, bitsLimit: number, floorOf: (step: number, walks: RdoWalks) => RowFloor): Map<number, { walk: LaneWalk; d: Int32Array | null }> {
  const out = new Map<number, { walk: LaneWalk; d: Int32Array | null }>();
  const { m, n } = t;
  const plain = kinds.filter((kind) => kind !== Predictor.Blend);
  const walks = RdoWalks.open(t.orig, base, t.classes.codes, m, n, bitsTable(), blendWeights(), plain.length);
  if (walks === null) return out;
  // A walk's differences, out of lane `lane` (the blend's walk leaves them where lane 0's were).
  const keep = (kind: number, walk: LaneWalk, lane: number): void => {
    const d = walk ? new Int32Array(m * n) : null;
    if (d !== null) walks.differences(d, lane);
    out.set(kind, { walk, d });
  };
  try {
    const floor = floorOf(step, walks);
    if (plain.length > 0 && plain.length <= walks.lanes) walks.walkLanes(plain, step, plain.map(() => w), seLimit, bitsLimit, FLOOR_KEEP, floor).forEach((walk, l) => keep(plain[l], walk, l));
    if (kinds.includes(Predictor.Blend)) keep(Predictor.Blend, walks.walkLanes([Predictor.Blend], step, [w], seLimit, bitsLimit, FLOOR_KEEP, floor)[0], 0);
  } finally {
    walks.close();
  }
  return out;
}

/**
 * Whether the low-rank part alone (`base`, every code 0) keeps the tile's
 * squared error within `seLimit`: its payload, with no residual section,
 * is then smaller than any with one, so the search need not walk (on a
 * 1024 x 1024 tile of bench/'s large field at psnr:40 the walks took
 * 0.4-0.6 s to find it).
 */
function zeroResidualFits(t: PreparedTile, base: Float64Array, seLimit: number): boolean {
  const { orig, classes } = t;
  let se = 0;
  for (let c = 0; c < base.length; c++) {
    if (classes.codes[c] !== Cell.Valid) continue;
    const x = orig[c] - base[c];
    se += x * x;
    if (se > seLimit) return false;
  }
  return true;
}

/** {@link residualForMse} at rank 0, of no use from `atMost` bytes. */
export function rankZeroForMse(t: PreparedTile, mse: number, atMost = Infinity): Uint8Array | null {
  return residualForMse(t, null, mse, atMost);
}
