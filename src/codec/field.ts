/**
 * Encode a whole 2-D field tile by tile. Pointwise bounds are met per tile;
 * L2 bounds share the field's squared-error budget across tiles, discarding
 * the field-wide smallest singular values first (Eckart-Young).
 */
import { isPointwise, resolveBound } from './bound.js';
import { RangeWatch, suspectError } from './fill-guard.js';
import { fillWords } from './mask.js';
import { fieldStep } from './payload.js';
import { ErrorTally } from './tally.js';
import { measure, measurePrefixes, type TileStats } from './measure.js';
import { planL2, type L2Plan } from './plan-l2.js';
import { type TileSvds } from './first-pass.js';
import { prepareTile, type PreparedTile } from './prepare.js';
import type { FloatArray } from '../types.js';
import { exactPayload } from './tile-encode.js';
import { pointwiseSearch } from './pointwise-search.js';
import { forEachTile, termFor, validRange, type BandSource, type FieldSpec } from './tiles.js';

export { forEachTile, tilesOf, memoryBands, termFor, validRange, type BandSource, type FieldSpec } from './tiles.js';
export { measure, measurePrefixes, type TileStats } from './measure.js';

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

/**
 * The field-level choices every tile is encoded with: made once per field
 * (value range, tolerance, and for L2 bounds the plan), after which tiles
 * are independent of one another and may be encoded in any order or thread.
 */
export interface FieldChoices {
  /** The resolved absolute tolerance (pointwise limit, or RMSE limit). */
  tol: number;
  range: [number, number] | null;
  /** The fill value's words in the field's dtype, or null. */
  fill: Uint32Array | null;
  dtype: FieldSpec['dtype'];
  progressive: boolean;
  /** The bound is held tile by tile (abs, rel, or a zero tolerance); else the L2 plan shares it. */
  pointwise: boolean;
  /** The L2 plan; null for pointwise bounds. */
  plan: L2Plan | null;
}

/**
 * The choices before the L2 plan: one pass over the source for the value
 * range (refusing, with `guardFill`, a value that looks like an undeclared
 * fill value), and the tolerance the bound resolves to; `plan` is still null.
 */
export function fieldBasis(src: BandSource, spec: FieldSpec): FieldChoices {
  const watch = spec.guardFill ? new RangeWatch(spec.fill) : undefined;
  const range = validRange(src, spec, watch);
  const suspect = watch?.suspect();
  if (suspect) throw suspectError(suspect, spec.name, spec.dtype === 'f32');
  return basisOf(spec, range);
}

/** The choices before the L2 plan, from the value range of the valid values (see {@link fieldBasis}). */
export function basisOf(spec: FieldSpec, range: [number, number] | null): FieldChoices {
  const span = range ? range[1] - range[0] : 0;
  let tol = resolveBound(spec.bound, span);
  if (!Number.isFinite(tol)) tol = Number.MAX_VALUE;
  const fill = fillWords(spec.fill, spec.dtype);
  const pointwise = isPointwise(spec.bound.mode) || tol === 0;
  return { tol, range, fill, dtype: spec.dtype, progressive: spec.progressive === true, pointwise, plan: null };
}

/**
 * Make the field-level choices: {@link fieldBasis} (or `basis`, made
 * before), and for L2 bounds the planning pass (see plan-l2.ts), or `plan`
 * when the tile trial made it.
 */
export function fieldChoices(src: BandSource, spec: FieldSpec, basis?: FieldChoices, plan?: L2Plan, known?: ReadonlyMap<number, Float64Array>, svds?: TileSvds): FieldChoices {
  const c = basis ? { ...basis } : fieldBasis(src, spec);
  if (!c.pointwise) c.plan = plan ?? planL2(src, spec, c.tol, c.fill, undefined, known, svds);
  return c;
}

/**
 * What was settled about a field before its encoding pass: its basis (the
 * range pass, made once), and tiles the tile trial already encoded with
 * that basis and the chosen shape, by tile index: the same outcomes the
 * encoding pass would compute (a pointwise tile depends only on its values
 * and the basis), so they are used as they are.
 */
export interface FieldPrior {
  basis: FieldChoices;
  done: ReadonlyMap<number, TileOutcome>;
  /**
   * The L2 plan, when the trial made the field's own (a trial on the whole
   * field, as one tile or as every tile of a field one tile high, plans
   * exactly as the encoding pass would): used as it is, not made again.
   */
  plan?: L2Plan;
  /** The singular values of the tiles the trial sampled, by tile index: the planning pass takes them as they are (see tileSpectrum in first-pass.ts). */
  spectra?: ReadonlyMap<number, Float64Array>;
  /** The SVDs the trial computed of those tiles without missing cells, by tile index: the planning pass takes them as they are (see TileSvds in plan-l2.ts). */
  svds?: TileSvds;
}

/**
 * A tile as the encoder takes it: prepared in the planning pass (kept), or
 * prepared now, coding its values minus the field layer's `term` when the
 * field has a layer (see termFor in tiles.ts).
 */
export function tileToEncode(c: FieldChoices, index: number, tile: FloatArray, m: number, n: number, term: Float64Array | null = null): PreparedTile {
  return c.plan?.kept(index) ?? prepareTile(tile, m, n, c.dtype, c.fill, c.tol, c.progressive ? 'doubling' : 'one', term);
}

/** One encoded tile with what it adds to the field's summary. */
export interface TileOutcome extends EncodedTile {
  /** Valid cells of the tile. */
  valid: number;
  /** The tile's errors, merged into the field's in tile order. */
  tally: ErrorTally;
  /** The bytes of {@link TileSearch} (what a tile trial of a small field weighs). */
  searched: number;
  /** {@link TileSearch.settled}'s bytes. */
  settled: number;
}

/**
 * A tile's encoding in steps: `bytes`, known first, are what a tile trial
 * weighs (see PointwiseSearch.trialBytes: the pointwise search's smallest
 * candidate's, or its first candidate's where that one's stream is
 * dense); settled(), the smallest candidate's (the others coded), before
 * it is finished with the blend predictor, the residual coder, the exact
 * payload, then the decoder's check. An L2 plan's payload's own, both.
 * finish() makes the outcome (once).
 */
export interface TileSearch {
  bytes: number;
  settled(): number;
  finish(): TileOutcome;
}

/** Encode one prepared tile under the field's choices; depends on nothing but its arguments. */
export function encodeTile(c: FieldChoices, t: PreparedTile, index: number): TileOutcome {
  return searchTile(c, t, index).finish();
}

/** {@link encodeTile} in two steps (see {@link TileSearch}). */
export function searchTile(c: FieldChoices, t: PreparedTile, index: number): TileSearch {
  // A payload may name the field's residual step by a flag; the reader derives it from the stored tolerance.
  if (t.fieldStep !== fieldStep(c.tol)) throw new Error(`internal: tile ${index} was prepared for another tolerance than the field's`);
  if (c.plan) {
    const { payload, res } = c.plan.encode(t, index);
    const o = outcome(c, t, payload, res, payload.length, payload.length);
    return { bytes: payload.length, settled: () => payload.length, finish: () => o };
  }
  const search = pointwiseSearch(t, c.tol);
  const bytes = search.trialBytes;
  const settled = () => search.best().bytes;
  let o: TileOutcome | undefined;
  const finish = () => {
    if (o === undefined) {
      let payload = search.finish();
      let res = measure(payload, t, c.fill);
      // The safety net: a tile that fails its own check is stored exactly.
      if (!(res.stats.maxErr <= c.tol)) {
        payload = exactPayload(t);
        res = measure(payload, t, c.fill);
      }
      o = outcome(c, t, payload, res, bytes, settled());
    }
    return o;
  };
  return { bytes, settled, finish };
}

/** A tile's outcome from its final payload and that payload's measurement. */
function outcome(c: FieldChoices, t: PreparedTile, payload: Uint8Array, res: ReturnType<typeof measure>, searched: number, settled: number): TileOutcome {
  // Prefixes are measured (and recorded) for progressive layouts only.
  res.stats.prefix = c.progressive ? measurePrefixes(payload, t, c.fill) : [];
  return { payload, stats: res.stats, valid: t.valid, tally: res.tally, searched, settled };
}

/** Folds tile outcomes, in tile order, into a field's summary. */
export class FieldSummary {
  private valid = 0;
  private readonly total = new ErrorTally();

  constructor(private readonly c: FieldChoices) {}

  add(o: TileOutcome): void {
    this.valid += o.valid;
    this.total.merge(o.tally);
  }

  result(): FieldResult {
    return { tolerance: this.c.tol, range: this.c.range, valid: this.valid, maxErr: this.total.max, rmse: this.total.rmse };
  }
}

/**
 * Encode every tile of a field, handing each to `emit` in row-major tile
 * order as soon as it is done. The source is read once for the value range
 * and once more per encoding pass (L2 bounds make one extra pass).
 */
export function encodeField(src: BandSource, spec: FieldSpec, emit: (index: number, tile: EncodedTile) => void, prior?: FieldPrior): FieldResult {
  const c = fieldChoices(src, spec, prior?.basis, prior?.plan, prior?.spectra, prior?.svds);
  const summary = new FieldSummary(c);
  forEachTile(src, spec, (index, tile, m, n) => {
    const o = prior?.done.get(index) ?? encodeTile(c, tileToEncode(c, index, tile, m, n, termFor(spec, index, m, n)), index);
    summary.add(o);
    emit(index, { payload: o.payload, stats: o.stats });
  });
  return summary.result();
}
