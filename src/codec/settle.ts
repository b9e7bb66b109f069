/**
 * The pointwise encoder's check of a candidate (see correct in
 * ./tile-encode.ts): the decoder's low-rank part of the tile (lowRank, and
 * the field layer's term), each valid cell's residual code, the cells whose
 * reconstruction still fails the bound, and the rough bits the predictor
 * choice needs, band by band of rows so that no whole-tile grid of the
 * low-rank part is made. The WebAssembly kernel (src/wasm/settle.ts) where
 * there is one, this JavaScript otherwise: the same bits.
 */
import { addLayer } from './layer.js';
import { Cell } from './mask.js';
import type { PreparedTile } from './prepare.js';
import { lowRank, predictorBitsRow, withResidual } from './reconstruct.js';
import { MAX_INT } from './section.js';
import { settleKernel, type Settled } from '../wasm/settle.js';

/** A candidate's low-rank part: its dequantized factors (lowRank's layout) and rank; null for rank 0. */
export interface LowRankPart {
  rank: number;
  l: Float64Array;
  w: Float64Array;
}

const NONE = new Float64Array(0);

/**
 * Cells of the low-rank part the JavaScript computes at a time: a band of
 * rows (512 KiB of binary64) that stays in a core's second-level cache
 * between its product and its codes (common practice, no source, for the size).
 */
const BAND_CELLS = 1 << 16;

/** Each tile's scratch band for the JavaScript's low-rank part (overwritten by every band, kept by no candidate). */
const bands = new WeakMap<PreparedTile, Float64Array>();

/** The JavaScript's band of rows (at most {@link BAND_CELLS} cells, at least one row) and its scratch. */
function bandOf(t: PreparedTile): { rows: number; base: Float64Array } {
  const rows = Math.max(1, Math.min(t.m, Math.floor(BAND_CELLS / Math.max(1, t.n))));
  let base = bands.get(t);
  if (base === undefined) {
    base = new Float64Array(rows * t.n);
    bands.set(t, base);
  }
  return { rows, base };
}

/** Rows i0 .. i0 + count - 1 of the low-rank part around `center` (with the layer's term where the tile has one) into base. */
function lowRankRows(t: PreparedTile, f: LowRankPart | null, center: number, i0: number, count: number, base: Float64Array): void {
  const { n } = t;
  if (f) lowRank(f.l.subarray(i0 * f.rank, (i0 + count) * f.rank), f.w, count, n, f.rank, center, base);
  else lowRank(NONE, NONE, count, n, 0, center, base);
  if (t.layer) addLayer(base, t.layer.subarray(i0 * n, (i0 + count) * n), count * n);
}

/**
 * Math.round(x) (the integer nearest x, a tie going up; ECMA-262
 * Math.round, from memory), except that it gives +0 where Math.round gives
 * -0 (x in [-0.5, -0]). floor(x + 0.5) is it unless x + 0.5 rounds up to
 * the next integer (x just below a half, or an odd integer at 2^52 and
 * above), which r - 0.5 > x detects: r - 0.5 is exact for the integers
 * where it matters, and for r = round(x) it is at most x. V8 compiles
 * Math.round to a ceiling and a test that goes either way about half the
 * time on residuals, a mispredicted branch a cell; this test almost never
 * holds (a 512 x 512 grid of random values rounded 4.4x faster, scratch
 * measurement, issue 10).
 */
export function roundHalfUp(x: number): number {
  let r = Math.floor(x + 0.5);
  if (r - 0.5 > x) r -= 1;
  return r;
}

/**
 * Settle the codes of a checked candidate (factors `f`, or rank 0, around
 * `center`) into q (every cell written: 0 where none is kept, a code of 0,
 * one beyond +-MAX_INT or a missing cell) and its failing cells into
 * `exceptions`, cell by cell with the decoder's arithmetic (see correct).
 * With `sums` (a tile without missing cells), each row's part of
 * predictorBits is added as soon as the row is settled, while it is in
 * cache. Returns whether a code is kept, the rough bits of q itself, and
 * false in `sumsOk` when an edge difference passed the code limit.
 */
export function settleCodes(t: PreparedTile, f: LowRankPart | null, center: number, e: number, step: number, q: Int32Array, exceptions: number[], sums: Float64Array | null): Settled {
  const { m, n } = t;
  const masked = t.classes.special > 0;
  const input = { l: f ? f.l : NONE, w: f ? f.w : NONE, m, n, r: f ? f.rank : 0, center, layer: t.layer, orig: t.orig, codes: masked ? t.classes.codes : null };
  const done = settleKernel(input, step, e, MAX_INT, q, exceptions, sums);
  if (done !== null) return done;
  const { orig } = t;
  const codes = t.classes.codes;
  const f32 = t.dtype === 'f32';
  const valid = Cell.Valid;
  const limit = MAX_INT;
  const { rows, base } = bandOf(t);
  // Kept codes, their bits and the OR of their magnitudes, without a branch on the code (its sign
  // and whether it is 0 go either way on a residual, a mispredicted branch a cell): every code fits
  // an int32 once the rare one beyond the limit is 0, |v| is (v ^ s) - s with s = v >> 31, and the
  // OR of every |v| is not 0 when one is kept.
  let any = 0;
  let bits = 0;
  let sumsOk = sums !== null;
  // The OR of |code| over the row above: a row pair below 2^28 (so at most limit / 4) takes
  // predictorBitsRow's unchecked path.
  let above = 0;
  for (let i0 = 0; i0 < m; i0 += rows) {
    const count = Math.min(rows, m - i0);
    lowRankRows(t, f, center, i0, count, base);
    const shift = i0 * n;
    for (let i = i0; i < i0 + count; i++) {
      let most = 0;
      const end = i * n + n;
      for (let c = i * n; c < end; c++) {
        if (masked && codes[c] !== valid) {
          q[c] = 0;
          continue;
        }
        const o = orig[c];
        const b = base[c - shift];
        let v = roundHalfUp((o - b) / step);
        if (!(v <= limit && v >= -limit)) v = 0;
        v |= 0;
        q[c] = v;
        const sign = v >> 31;
        const a = (v ^ sign) - sign;
        bits += 32 - Math.clz32(a);
        most |= a;
        const sum = withResidual(b, v, step);
        if (!(Math.abs(o - (f32 ? Math.fround(sum) : sum)) <= e)) exceptions.push(c);
      }
      if (sumsOk) sumsOk = predictorBitsRow(q, n, limit, i, sums!, (most | above) < 2 ** 28);
      above = most;
      any |= most;
    }
  }
  return { any: any !== 0, bits, sumsOk, nonzero: null };
}

/** The valid cells whose low-rank part alone (rounded to the dtype) is not within e of the value, in increasing order: the check of a candidate without a residual. */
export function unsettledCells(t: PreparedTile, f: LowRankPart | null, center: number, e: number): number[] {
  const { m, n, orig } = t;
  const codes = t.classes.codes;
  const f32 = t.dtype === 'f32';
  const { rows, base } = bandOf(t);
  const out: number[] = [];
  for (let i0 = 0; i0 < m; i0 += rows) {
    const count = Math.min(rows, m - i0);
    lowRankRows(t, f, center, i0, count, base);
    const shift = i0 * n;
    for (let c = shift; c < shift + count * n; c++) {
      if (codes[c] !== Cell.Valid) continue;
      const b = base[c - shift];
      if (!(Math.abs(orig[c] - (f32 ? Math.fround(b) : b)) <= e)) out.push(c);
    }
  }
  return out;
}
