/**
 * The walks of the residual search under L2 bounds (src/codec/rdo.ts,
 * RdoWalk.run and RowFloor, the predictors other than the blend) in the
 * WebAssembly kernels (kernels/rdo.ts, the module RDO_KERNELS): the same
 * codes, differences and sums as the JavaScript. A {@link RdoWalks} holds
 * the kernels' memory with one tile's values laid out in it, for a run of
 * walks; it must be closed before any other kernel is used (a nested use
 * of the memory runs the JavaScript, see Kernels.lease).
 */
import { RDO_KERNELS } from './kernels-bytes.js';
import { kernels, SCRATCH_AT, type Kernels } from './kernels.js';

/** The exports of kernels/rdo.ts: addresses are byte offsets into the kernels' memory. */
interface RdoKernels {
  rowFloor(orig: number, f32: number, base: number, codes: number, m: number, n: number, step: number, restSe: number, restValid: number): void;
  rdoWalk(orig: number, f32: number, base: number, codes: number, q: number, d: number, table: number, m: number, n: number, kind: number, step: number, w: number, seLimit: number, bitsLimit: number, keep: number, restSe: number, restValid: number, out: number): number;
}

/** A multiple of 16 at least `bytes`. */
function up16(bytes: number): number {
  return Math.ceil(bytes / 16) * 16;
}

/** What a walk in the kernels gave: its sums, false (the JavaScript's false), or null (a NaN value: walk in JavaScript). */
export type KernelWalk = { se: number; bits: number } | false | null;

/** One tile's values in the kernels' memory, for a run of walks (see the module's comment). */
export class RdoWalks {
  private constructor(
    private readonly k: Kernels,
    private readonly fn: RdoKernels,
    private readonly m: number,
    private readonly n: number,
    private readonly f32: number,
    private readonly at: { orig: number; base: number; codes: number; q: number; d: number; table: number; restSe: number; restValid: number; out: number },
  ) {}

  /**
   * Lay out a tile (its values `orig`, the low-rank part `base` and class
   * codes, m x n) and the rough-bits table in the kernels' memory; null
   * where the kernels are not to be had (nothing is held then).
   */
  static open(orig: Float32Array | Float64Array, base: Float64Array, codes: Uint8Array, m: number, n: number, table: Float64Array): RdoWalks | null {
    const cells = m * n;
    if (cells === 0 || orig.length < cells || base.length < cells || codes.length < cells) return null;
    const k = kernels();
    if (k === null) return null;
    const f32 = orig instanceof Float32Array;
    const width = f32 ? 4 : 8;
    // Byte addresses from SCRATCH_AT: the sums, the table, RowFloor's two arrays, base, values, q, d, class codes.
    const out = SCRATCH_AT;
    const tableAt = out + 16;
    const restSe = up16(tableAt + 8 * table.length);
    const restValid = up16(restSe + 8 * (m + 1));
    const baseAt = up16(restValid + 8 * (m + 1));
    const origAt = up16(baseAt + 8 * cells);
    const q = up16(origAt + width * cells);
    const d = up16(q + 4 * cells);
    const codesAt = up16(d + 4 * cells);
    if (!k.lease(codesAt + cells - SCRATCH_AT)) return null;
    const fn = k.module<RdoKernels>(RDO_KERNELS);
    if (fn === null) {
      k.release();
      return null;
    }
    k.f64.set(table, tableAt / 8);
    k.f64.set(base.subarray(0, cells), baseAt / 8);
    if (f32) new Float32Array(k.f64.buffer).set(orig.subarray(0, cells), origAt / 4);
    else k.f64.set(orig.subarray(0, cells), origAt / 8);
    k.u8.set(codes.subarray(0, cells), codesAt);
    return new RdoWalks(k, fn, m, n, f32 ? 1 : 0, { orig: origAt, base: baseAt, codes: codesAt, q, d, table: tableAt, restSe, restValid, out });
  }

  /** RowFloor's sums at `step` (from each row to the end: squared error of the nearest codes, valid cells), m + 1 each. */
  floor(step: number): { restSe: Float64Array; restValid: Float64Array } {
    const { at, m } = this;
    this.fn.rowFloor(at.orig, this.f32, at.base, at.codes, m, this.n, step, at.restSe, at.restValid);
    const heap = this.k.f64;
    return { restSe: heap.slice(at.restSe / 8, at.restSe / 8 + m + 1), restValid: heap.slice(at.restValid / 8, at.restValid / 8 + m + 1) };
  }

  /** A walk of predictor `kind` (None to Median) with RowFloor's sums `floor` (see {@link KernelWalk}); its differences are read with {@link RdoWalks.differences}. */
  walk(kind: number, step: number, w: number, seLimit: number, bitsLimit: number, keep: number, floor: { restSe: Float64Array; restValid: Float64Array }): KernelWalk {
    const { at, m } = this;
    const heap = this.k.f64;
    heap.set(floor.restSe.subarray(0, m + 1), at.restSe / 8);
    heap.set(floor.restValid.subarray(0, m + 1), at.restValid / 8);
    const r = this.fn.rdoWalk(at.orig, this.f32, at.base, at.codes, at.q, at.d, at.table, m, this.n, kind, step, w, seLimit, bitsLimit, keep, at.restSe, at.restValid, at.out);
    if (r < 0) return null;
    if (r === 0) return false;
    return { se: heap[at.out / 8], bits: heap[at.out / 8 + 1] };
  }

  /** The differences of the last walk that returned its sums, into `d` (m x n). */
  differences(d: Int32Array): void {
    const cells = this.m * this.n;
    d.set(this.k.i32.subarray(this.at.d / 4, this.at.d / 4 + cells));
  }

  /** Give the kernels' memory back. */
  close(): void {
    this.k.release();
  }
}
