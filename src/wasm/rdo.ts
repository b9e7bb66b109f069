/**
 * The walks of the residual search under L2 bounds (src/codec/rdo.ts,
 * RdoWalk.run and RowFloor, every predictor) in the WebAssembly kernels
 * (kernels/rdo.ts and kernels/rdo-blend.ts, the module RDO_KERNELS, and
 * kernels/rdo-floor.ts with kernels/rdo-lanes.ts, the module
 * RDO_FLOOR_KERNELS): the same codes, differences and sums as the
 * JavaScript. A {@link RdoWalks} holds
 * the kernels' memory with one tile's values laid out in it, for a run of
 * walks; it must be closed before any other kernel is used (a nested use
 * of the memory runs the JavaScript, see Kernels.lease).
 */
import { RDO_FLOOR_KERNELS, RDO_KERNELS } from './kernels-bytes.js';
import { KEEP_BYTES, kernels, SCRATCH_AT, WEIGHTS_BYTES, type Kernels } from './kernels.js';

/** The exports of kernels/rdo.ts: addresses are byte offsets into the kernels' memory. */
interface RdoKernels {
  rdoWalk(grid: number, codes: number, q: number, d: number, table: number, m: number, n: number, kind: number, step: number, w: number, seLimit: number, bitsLimit: number, keep: number, restSe: number, restBits: number, out: number): number;
  rdoBlendLanes(grid: number, codes: number, q: number, d: number, table: number, m: number, n: number, step: number, weights: number, lanes: number, seLimit: number, bitsLimit: number, keep: number, restSe: number, restBits: number, weight: number, parts: number, partBytes: number, state: number): void;
}

/** The exports of kernels/rdo-floor.ts. */
interface RdoFloorKernels {
  residuals(orig: number, f32: number, base: number, cells: number): void;
  scaled(r: number, grid: number, cells: number, step: number): void;
  rowFloor(r: number, grid: number, codes: number, table: number, m: number, n: number, step: number, kind: number, lo: number, hi: number, restSe: number, restBits: number, restValid: number): void;
  rdoLanes(grid: number, codes: number, rows: number, d: number, table: number, m: number, n: number, kinds: number, step: number, weights: number, lanes: number, seLimit: number, bitsLimit: number, keep: number, restSe: number, restBits: number, state: number): void;
}

/** The most walks {@link RdoWalks.walkLanes} runs in one pass (kernels/rdo-lanes.ts), and the bytes of a lane's state there. */
const MAX_LANES = 4;
const LANE_STATE = 48;

/** The blend predictor's id (src/codec/reconstruct.ts, Predictor.Blend). */
const BLEND = 6;

/** A multiple of 16 at least `bytes`. */
function up16(bytes: number): number {
  return Math.ceil(bytes / 16) * 16;
}

/** What a walk in the kernels gave: its sums, false (the JavaScript's false), or null (a NaN value: walk in JavaScript). */
export type KernelWalk = { se: number; bits: number } | false | null;

/**
 * What one lane of {@link RdoWalks.walkLanes} gave: its walk as
 * {@link KernelWalk} under the pass's limits, and with its sums (where it
 * walked every cell) the largest squared error and rough bits its sums
 * plus the floor's reached after a row (from before the first): under a
 * tighter rough-bits limit L, the walk would have given false exactly when
 * `bitsFloor` passes L (see kernels/rdo-lanes.ts).
 */
export type LaneWalk = { se: number; bits: number; seFloor: number; bitsFloor: number } | false | null;

/** One tile's values in the kernels' memory, for a run of walks (see the module's comment). */
export class RdoWalks {
  private constructor(
    private readonly k: Kernels,
    private readonly fn: RdoKernels,
    private readonly floorFn: RdoFloorKernels,
    private readonly m: number,
    private readonly n: number,
    private readonly at: { r: number; grid: number; codes: number; q: number; d: number; table: number; restSe: number; restBits: number; restValid: number; out: number; lo: number; hi: number; rows: number; weights: number; kinds: number; state: number; parts: number; partBytes: number },
    /** The walks {@link RdoWalks.walkLanes} can run in one pass. */
    readonly lanes: number,
  ) {}

  /** The step whose scaled values the grid holds (NaN: none yet). */
  private gridStep = Number.NaN;

  /**
   * Lay out a tile (its values `orig`, the low-rank part `base` and class
   * codes, m x n), the rough-bits table and the blend's weight table
   * (`weights`, where the kernels' memory does not hold it yet) in the
   * kernels' memory; null where the kernels are not to be had (nothing is
   * held then). With room for up to `lanes` walks of one pass
   * ({@link RdoWalks.walkLanes}; of the blend where `blend`, each with a
   * grid of its codes), as many as keep the memory within KEEP_BYTES
   * (src/wasm/kernels.ts: a larger one is made anew for each use): 4 on a
   * 512 x 512 tile, on a 1024 x 1024 one 2 of the plain predictors and 1
   * of the blend.
   */
  static open(orig: Float32Array | Float64Array, base: Float64Array, codes: Uint8Array, m: number, n: number, table: Float64Array, weights: Int32Array, lanes = 1, blend = false): RdoWalks | null {
    const cells = m * n;
    if (cells === 0 || orig.length < cells || base.length < cells || codes.length < cells) return null;
    const k = kernels();
    if (k === null) return null;
    const f32 = orig instanceof Float32Array;
    if (4 * weights.length > WEIGHTS_BYTES) return null;
    // Byte addresses from SCRATCH_AT: the sums, the table, RowFloor's three arrays, the values less base (r: base is
    // copied there), the scaled values (the grid: the values are copied there, for residuals() to read), q (a grid a
    // lane of the blend, else one), the lanes' state, weights, predictors and two rows of codes each, d (a grid a
    // lane), the blend's parts a lane (its errors, after 8 more, and the sums of the row above and this one), the
    // floor's intervals, class codes.
    const partBytes = up16(32 + 60 * n);
    const fixed = 64 + 8 * table.length + 24 * (m + 1) + 8 * n + MAX_LANES * (LANE_STATE + 12 + 8 * n + partBytes) + 256;
    let count = Math.max(1, Math.min(MAX_LANES, lanes));
    while (count > 1 && fixed + (17 + 4 * count + 4 * (blend ? count : 1)) * cells > KEEP_BYTES - SCRATCH_AT) count--;
    const out = SCRATCH_AT;
    const tableAt = out + 16;
    const restSe = up16(tableAt + 8 * table.length);
    const restBits = up16(restSe + 8 * (m + 1));
    const restValid = up16(restBits + 8 * (m + 1));
    const r = up16(restValid + 8 * (m + 1));
    const grid = up16(r + 8 * cells);
    const q = up16(grid + 8 * cells);
    const state = up16(q + 4 * cells * (blend ? count : 1));
    const laneWeights = up16(state + LANE_STATE * count);
    const kinds = up16(laneWeights + 8 * count);
    const rows = up16(kinds + 4 * count);
    const d = up16(rows + 8 * n * count);
    const parts = up16(d + 4 * cells * count);
    const lo = up16(parts + partBytes * count);
    const hi = up16(lo + 4 * n);
    const codesAt = up16(hi + 4 * n);
    if (!k.lease(codesAt + cells - SCRATCH_AT)) return null;
    const fn = k.module<RdoKernels>(RDO_KERNELS);
    const floorFn = k.module<RdoFloorKernels>(RDO_FLOOR_KERNELS);
    if (fn === null || floorFn === null) {
      k.release();
      return null;
    }
    if (!k.weightsLoaded) {
      k.i32.set(weights, 0);
      k.weightsLoaded = true;
    }
    k.f64.set(table, tableAt / 8);
    k.f64.set(base.subarray(0, cells), r / 8);
    if (f32) k.f32.set(orig.subarray(0, cells), grid / 4);
    else k.f64.set(orig.subarray(0, cells), grid / 8);
    k.u8.set(codes.subarray(0, cells), codesAt);
    floorFn.residuals(grid, f32 ? 1 : 0, r, cells);
    return new RdoWalks(k, fn, floorFn, m, n, { r, grid, codes: codesAt, q, d, table: tableAt, restSe, restBits, restValid, out, lo, hi, rows, weights: laneWeights, kinds, state, parts, partBytes }, count);
  }

  /** RowFloor's sums at `step` for predictor `kind` (from each row to the end: the least squared error and rough bits a walk adds, the valid cells), m + 1 each; the grid then holds the scaled values at `step`. */
  floor(step: number, kind: number): { restSe: Float64Array; restBits: Float64Array; restValid: Float64Array } {
    const { at, m } = this;
    this.floorFn.rowFloor(at.r, at.grid, at.codes, at.table, m, this.n, step, kind, at.lo, at.hi, at.restSe, at.restBits, at.restValid);
    this.gridStep = step;
    const heap = this.k.f64;
    const take = (a: number) => heap.slice(a / 8, a / 8 + m + 1);
    return { restSe: take(at.restSe), restBits: take(at.restBits), restValid: take(at.restValid) };
  }

  /** A walk of predictor `kind` (None to the blend) with RowFloor's sums `floor` (see {@link KernelWalk}); its differences are read with {@link RdoWalks.differences}. */
  walk(kind: number, step: number, w: number, seLimit: number, bitsLimit: number, keep: number, floor: { restSe: Float64Array; restBits: Float64Array }): KernelWalk {
    const { at, m } = this;
    const heap = this.k.f64;
    heap.set(floor.restSe.subarray(0, m + 1), at.restSe / 8);
    heap.set(floor.restBits.subarray(0, m + 1), at.restBits / 8);
    if (this.gridStep !== step) {
      this.floorFn.scaled(at.r, at.grid, m * this.n, step);
      this.gridStep = step;
    }
    if (kind === BLEND) {
      // The blend's lanes kernel with one lane (its state where the other walk's sums go).
      heap[at.weights / 8] = w;
      this.fn.rdoBlendLanes(at.grid, at.codes, at.q, at.d, at.table, m, this.n, step, at.weights, 1, seLimit, bitsLimit, keep, at.restSe, at.restBits, 0, at.parts, at.partBytes, at.state);
      return this.laneWalk(0);
    }
    const r = this.fn.rdoWalk(at.grid, at.codes, at.q, at.d, at.table, m, this.n, kind, step, w, seLimit, bitsLimit, keep, at.restSe, at.restBits, at.out);
    if (r < 0) return null;
    if (r === 0) return false;
    return { se: heap[at.out / 8], bits: heap[at.out / 8 + 1] };
  }

  /** Lane l's walk from the kernels' state (status, squared error and rough bits; see {@link KernelWalk}). */
  private laneWalk(l: number): { se: number; bits: number } | false | null {
    const s = this.at.state + LANE_STATE * l;
    const r = this.k.i32[s / 4];
    if (r < 0) return null;
    if (r === 0) return false;
    return { se: this.k.f64[s / 8 + 2], bits: this.k.f64[s / 8 + 3] };
  }

  /**
   * Walks of the predictors `kinds` at one step and the weights `ws` (lane
   * l: kinds[l] at ws[l], at most {@link RdoWalks.lanes}): plain ones (None
   * to the median, kernels/rdo-lanes.ts), or all the blend
   * (kernels/rdo-blend.ts, laid out for it: see {@link RdoWalks.open}), all
   * in one pass under the same limits (see {@link LaneWalk}); lane l's
   * differences are read with {@link RdoWalks.differences}(d, l).
   */
  walkLanes(kinds: readonly number[], step: number, ws: readonly number[], seLimit: number, bitsLimit: number, keep: number, floor: { restSe: Float64Array; restBits: Float64Array }): LaneWalk[] {
    const { at, m, n } = this;
    const blend = kinds.includes(BLEND);
    // Internal assertion: the lanes were laid out, and the blend's walks are not among the plain ones.
    if (ws.length > this.lanes || kinds.length !== ws.length || (blend && !kinds.every((k) => k === BLEND))) throw new Error(`internal: ${ws.length} walks of predictors ${kinds} in ${this.lanes} lanes`);
    const heap = this.k.f64;
    heap.set(floor.restSe.subarray(0, m + 1), at.restSe / 8);
    heap.set(floor.restBits.subarray(0, m + 1), at.restBits / 8);
    heap.set(ws, at.weights / 8);
    this.k.i32.set(kinds, at.kinds / 4);
    if (this.gridStep !== step) {
      this.floorFn.scaled(at.r, at.grid, m * n, step);
      this.gridStep = step;
    }
    if (blend) {
      this.fn.rdoBlendLanes(at.grid, at.codes, at.q, at.d, at.table, m, n, step, at.weights, ws.length, seLimit, bitsLimit, keep, at.restSe, at.restBits, 0, at.parts, at.partBytes, at.state);
      // Its sums stop a walk cell by cell: under a tighter limit L the walk would have given false exactly when its floor before the first row, or its bits, pass L.
      const before = keep * floor.restBits[0];
      return ws.map((_w, l) => {
        const r = this.laneWalk(l);
        return r ? { ...r, seFloor: r.se, bitsFloor: Math.max(before, r.bits) } : r;
      });
    }
    this.floorFn.rdoLanes(at.grid, at.codes, at.rows, at.d, at.table, m, n, at.kinds, step, at.weights, ws.length, seLimit, bitsLimit, keep, at.restSe, at.restBits, at.state);
    return ws.map((_w, l) => {
      const r = this.laneWalk(l);
      const s = (at.state + LANE_STATE * l) / 8;
      return r ? { ...r, seFloor: heap[s + 4], bitsFloor: heap[s + 5] } : r;
    });
  }

  /** The differences of the last walk that returned its sums (of lane `lane` of the last {@link RdoWalks.walkLanes}), into `d` (m x n). */
  differences(d: Int32Array, lane = 0): void {
    const cells = this.m * this.n;
    const from = this.at.d / 4 + lane * cells;
    d.set(this.k.i32.subarray(from, from + cells));
  }

  /** Give the kernels' memory back. */
  close(): void {
    this.k.release();
  }
}
