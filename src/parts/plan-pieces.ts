/**
 * A plan made in parts: the first pass of a run split over processes or
 * machines, then merged into the plan one `makePlan` makes, byte for byte.
 *
 * The plan's choices depend on one another: a psnr or rel bound resolves
 * against the whole field's value range, the tolerance sets how missing
 * cells are filled and what the spectra are measured in, and the L2 plan
 * shares the whole field's budget. So it is made in two passes, each split
 * into parts and merged:
 *
 * 1. The range pass: part K of N reads rows floor((K-1) R / N) to
 *    floor(K R / N) - 1 of the R rows and records their value range, the
 *    fill-value guard's state and a CRC-32 of every row. Its merge takes
 *    the range and the tolerance from them, chooses the tile shape by
 *    trial when asked (reading only the bands of the sampled tiles), and
 *    joins the rows' CRC-32s into the bands' (CRC-32 combination): for
 *    abs and rel bounds that is the plan, for rmse and psnr bounds the
 *    plan's base, which holds everything but the L2 plan.
 * 2. The spectra pass (rmse, psnr): part K of N of the base's split (the
 *    one `pack --part` uses) reads its bands, checks them against the base,
 *    and records every tile's valid cells and the squared singular values
 *    that a cut could reach (see `cuttable`). Its merge gathers them into
 *    one store and chooses the L2 plan as `planL2` does, preparing the
 *    sampled tiles from the input (reading only their bands; each piece
 *    records a CRC-32 of the sampled tiles it holds, checked there).
 *
 * Pieces are JSON (piece-text.ts; spec/FORMAT.md, 20.1), with a SHA-256 of their content;
 * a merge refuses pieces of another request or base, repeated or missing
 * parts, with one line.
 */
import { basisOf, type BandSource, type FieldSpec } from '../codec/field.js';
import { RangeWatch, suspectError, type Suspect } from '../codec/fill-guard.js';
import { fillWords } from '../codec/mask.js';
import { chooseL2, readTiles } from '../codec/plan-l2.js';
import { cuttable, firstPassTile, sampleTiles } from '../codec/first-pass.js';
import { Spectra } from '../codec/spectra.js';
import { tilesOf, validRange, tileGrid } from '../codec/tiles.js';
import { InputCode, InputError } from '../errors.js';
import { crc32 } from '../format/crc32.js';
import type { BoundMode, Dtype, FloatArray } from '../types.js';
import { VERSION_STRING } from '../version.js';
import { partBands } from './part.js';
import { bandCrcs, finishPlan, isPointwisePlan, partRange, planSpec, trialTile, type PlanRequest, type RunPlan } from './plan.js';

/** The version of the pieces' JSON form. */
export const PIECE_VERSION = 1;
const WRITER = `rankfield ${VERSION_STRING}`;

/** What a range pass is asked for: the plan request's field and options (the tile shape may still be 'auto'). */
export interface PieceAsk {
  name: string;
  dtype: Dtype;
  shape: [number, number];
  nd_shape: number[] | null;
  dims: string[] | null;
  layout: string | null;
  tile: [number, number] | 'auto';
  page: [number, number];
  bound: [BoundMode, number];
  fill: number | null;
  progressive: boolean;
}

/** Part K of N of the range pass. */
export interface RangePiece {
  pass: 'range';
  writer: string;
  ask: PieceAsk;
  part: [number, number];
  /** Rows [r0, r1) of the field. */
  rows: [number, number];
  /** Min and max of the valid values of these rows, or null when there are none. */
  range: [number, number] | null;
  /** The fill-value guard's state over these rows (see RangeWatch.state), or null when the guard is off. */
  watch: number[] | null;
  /** CRC-32 of each row's values (native-order bytes of the dtype). */
  row_crc: number[];
}

/** Part K of N of the spectra pass. */
export interface SpectraPiece {
  pass: 'spectra';
  writer: string;
  /** The plan's base (its text's object, carried whole so the merge needs nothing else). */
  base: RunPlan;
  part: [number, number];
  /** Tiles [t0, t1) of the field. */
  tiles: [number, number];
  /** Per tile: rows, columns, valid cells, singular values in all, and how many of the smallest are held. */
  m: Int32Array;
  n: Int32Array;
  valid: Int32Array;
  full: Int32Array;
  held: Int32Array;
  /** The held squared singular values (units of tol^2), tile after tile, each tile's descending. */
  values: Float64Array;
  /** [tile, CRC-32 of its values] for each sampled tile of this part. */
  sample_crc: [number, number][];
}

export type PlanPiece = RangePiece | SpectraPiece;

/** Rows [r0, r1) of part k of n of the range pass: the rows split as evenly as whole rows allow. */
export function rangeRows(rows: number, k: number, n: number): [number, number] {
  if (!Number.isSafeInteger(n) || n < 1 || !Number.isSafeInteger(k) || k < 1 || k > n) throw new InputError(InputCode.Option, `part ${k}/${n}: give K/N with 1 <= K <= N`);
  if (n > rows) throw new InputError(InputCode.Option, `part ${k}/${n}: the field has ${rows} row${rows === 1 ? '' : 's'}, so its range pass splits into at most ${rows} parts`);
  return [Math.floor(((k - 1) * rows) / n), Math.floor((k * rows) / n)];
}

function askOf(req: Pick<PlanRequest, 'spec' | 'page' | 'nd'>): PieceAsk {
  const s = req.spec;
  return {
    name: s.name,
    dtype: s.dtype,
    shape: [s.rows, s.cols],
    nd_shape: req.nd?.nd_shape ?? null,
    dims: req.nd?.dims ?? null,
    layout: req.nd?.layout ?? null,
    tile: s.autoTile ? 'auto' : [s.tileRows, s.tileCols],
    page: req.page,
    bound: [s.bound.mode, s.bound.value],
    fill: s.fill,
    progressive: s.progressive === true,
  };
}

/** The request an ask stands for (the tile shape 64 x 64 while it is still to be chosen, as pack's options give it). */
function requestOf(a: PieceAsk, file: string, run?: string): Pick<PlanRequest, 'spec' | 'page' | 'nd' | 'file' | 'run'> {
  const [tr, tc] = a.tile === 'auto' ? [64, 64] : a.tile;
  const spec: FieldSpec = { name: a.name, dtype: a.dtype, rows: a.shape[0], cols: a.shape[1], tileRows: tr, tileCols: tc, bound: { mode: a.bound[0], value: a.bound[1] }, fill: a.fill, autoTile: a.tile === 'auto', progressive: a.progressive };
  const nd = a.nd_shape === null ? undefined : { nd_shape: a.nd_shape, ...(a.dims === null ? {} : { dims: a.dims }), ...(a.layout === null ? {} : { layout: a.layout }) };
  return { spec, page: a.page, nd, file, run };
}

/**
 * Part k of n of the range pass over the field of `req` read from `src`
 * (the whole field's rows; only the part's are read). `watch`: keep the
 * fill-value guard's state (default: the spec's guardFill).
 */
export function rangePiece(src: BandSource, req: Pick<PlanRequest, 'spec' | 'page' | 'nd'>, k: number, n: number, watch = req.spec.guardFill === true): RangePiece {
  const spec = req.spec;
  if ((spec.slices ?? 1) > 1) throw new InputError(InputCode.Option, `field '${spec.name}' holds ${spec.slices} slices: plans and parts split 2-D fields and matrix layouts only`);
  const [r0, r1] = rangeRows(spec.rows, k, n);
  const w = watch ? new RangeWatch(spec.fill) : undefined;
  const row_crc: number[] = [];
  const rowSrc: BandSource = {
    band: (r, count) => {
      const v = src.band(r0 + r, count);
      for (let i = 0; i < count; i++) {
        const row = v.subarray(i * spec.cols, (i + 1) * spec.cols);
        row_crc.push(crc32(new Uint8Array(row.buffer, row.byteOffset, row.byteLength)));
      }
      return v;
    },
  };
  const range = validRange(rowSrc, { ...spec, rows: r1 - r0, slices: 1 }, w);
  // Internal assertion: validRange reads every row once, in order.
  if (row_crc.length !== r1 - r0) throw new Error(`the range pass read ${row_crc.length} rows, not ${r1 - r0}`);
  return { pass: 'range', writer: WRITER, ask: askOf(req), part: [k, n], rows: [r0, r1], range, watch: w ? w.state() : null, row_crc };
}

/** Options of {@link mergeRange} and {@link mergeSpectra}. */
export interface MergeOptions {
  /** The input's file name, recorded in the plan for messages (default: the base's, or 'input'). */
  file?: string;
  /** The run's name (default: the field name and the hash's first 12 hex digits). */
  run?: string;
  /** Where the input is named in messages. */
  input?: string;
  /** What to do with a value the fill-value guard suspects (default: refuse with the library's InputError). */
  onSuspect?: (s: Suspect) => never;
}

/** The one line why `pieces` are not every part of one pass once, or null. `same` gives what the parts of one pass share. */
function partsProblem(pieces: { label: string; piece: PlanPiece }[], same: (p: PlanPiece) => string, what: string): string | null {
  if (pieces.length === 0) return 'merge needs the pieces of a pass';
  const p0 = pieces[0];
  for (const p of pieces) {
    if (p.piece.pass !== p0.piece.pass) return `'${p.label}' is a piece of the ${p.piece.pass} pass, '${p0.label}' of the ${p0.piece.pass} pass: merge the pieces of one pass`;
    if (p.piece.writer !== WRITER) return `'${p.label}' was written by ${p.piece.writer}, this is ${WRITER}: the pieces of a plan are made and merged by one program`;
    if (same(p.piece) !== same(p0.piece)) return `'${p.label}' and '${p0.label}' are pieces of different ${what}: merge the pieces of one`;
    if (p.piece.part[1] !== p0.piece.part[1]) return `'${p.label}' is part ${p.piece.part.join('/')}, '${p0.label}' part ${p0.piece.part.join('/')}: the pieces of one pass share one count`;
  }
  const n = p0.piece.part[1];
  const seen = new Map<number, string>();
  for (const p of pieces) {
    const other = seen.get(p.piece.part[0]);
    if (other !== undefined) return `part ${p.piece.part[0]}/${n} of the ${p0.piece.pass} pass is given twice: '${other}' and '${p.label}'`;
    seen.set(p.piece.part[0], p.label);
  }
  const missing: number[] = [];
  for (let k = 1; k <= n; k++) if (!seen.has(k)) missing.push(k);
  if (missing.length > 0) {
    const list = missing.length > 12 ? `${missing.slice(0, 12).join(', ')}, ... (${missing.length} in all)` : missing.join(', ');
    return `the ${p0.piece.pass} pass has ${n} parts; part${missing.length === 1 ? '' : 's'} ${list} ${missing.length === 1 ? 'is' : 'are'} missing`;
  }
  return null;
}

/** The pieces checked to be every part of one pass once, in part order. */
function inOrder<P extends PlanPiece>(pieces: { label: string; piece: PlanPiece }[], pass: P['pass'], same: (p: PlanPiece) => string, what: string): { label: string; piece: P }[] {
  const first = pieces[0];
  if (first !== undefined && first.piece.pass !== pass) throw new InputError(InputCode.Option, `'${first.label}' is a piece of the ${first.piece.pass} pass, not the ${pass} pass`);
  const why = partsProblem(pieces, same, what);
  if (why) throw new InputError(InputCode.Option, why);
  return [...pieces].sort((a, b) => a.piece.part[0] - b.piece.part[0]) as { label: string; piece: P }[];
}

/**
 * Merge the pieces of a range pass into the plan (abs and rel bounds) or
 * its base (rmse and psnr: `base` is true), as makePlan makes it from the
 * same input. `src` serves the whole field's rows: only the tile trial's
 * sampled tiles are read, when the tile shape is chosen by trial.
 */
export function mergeRange(src: BandSource, pieces: { label: string; piece: PlanPiece }[], o: MergeOptions = {}): { plan: RunPlan; base: boolean } {
  const ordered = inOrder<RangePiece>(pieces, 'range', (p) => JSON.stringify((p as RangePiece).ask), 'requests (their field or options differ)');
  const a = ordered[0].piece.ask;
  for (const { label, piece } of ordered) {
    const want = rangeRows(a.shape[0], piece.part[0], piece.part[1]);
    if (piece.rows[0] !== want[0] || piece.rows[1] !== want[1]) throw new InputError(InputCode.Option, `${label}: part ${piece.part.join('/')} holds rows ${piece.rows[0]}..${piece.rows[1] - 1}, not rows ${want[0]}..${want[1] - 1}`);
  }
  // The range and the guard's state, folded in row order as one pass over the field folds them.
  let range: [number, number] | null = null;
  for (const { piece } of ordered) if (piece.range) range = range === null ? [...piece.range] : [Math.min(range[0], piece.range[0]), Math.max(range[1], piece.range[1])];
  const states = ordered.map(({ piece }) => piece.watch);
  if (states.some((s) => s !== null) && states.some((s) => s === null)) throw new InputError(InputCode.Option, 'the pieces disagree on the fill-value guard (some kept it, some did not): make them again with the same options');
  if (states[0] !== null) {
    const w = RangeWatch.fromState(a.fill, states[0]);
    for (const s of states.slice(1)) w.merge(RangeWatch.fromState(a.fill, s as number[]));
    const s = w.suspect();
    if (s) (o.onSuspect ?? ((x: Suspect) => { throw suspectError(x, a.name, a.dtype === 'f32'); }))(s);
  }
  const req = requestOf(a, o.file ?? 'input', o.run);
  const c = basisOf(req.spec, range);
  const spec = trialTile(src, req.spec, c);
  const band_crc = bandCrcs(ordered.flatMap(({ piece }) => piece.row_crc), spec, req.page);
  return { plan: finishPlan(req, spec, band_crc, c, null), base: !c.pointwise };
}

/** The CRC-32 of a tile's values (native-order bytes of its dtype). */
function tileCrc(t: FloatArray): number {
  return crc32(new Uint8Array(t.buffer, t.byteOffset, t.byteLength));
}

/**
 * Part k of n of the spectra pass of `base` (a plan's base, see
 * {@link mergeRange}), reading from `src` (the whole field's rows) only
 * the part's rows, each band checked against the base's CRC-32.
 */
export function spectraPiece(src: BandSource, base: RunPlan, k: number, n: number, input = base.source.file): SpectraPiece {
  const f = base.field;
  if (base.l2 !== null || isPointwisePlan(f)) throw new InputError(InputCode.Option, `plan '${base.run}' is not the base of a plan made in parts: its bound ${f.bound.mode} needs no spectra pass`);
  const range = partRange(base, k, n);
  const full = planSpec(f);
  const spec: FieldSpec = { ...full, rows: range.rows[1] - range.rows[0] };
  const fill = fillWords(f.fill, f.dtype);
  const cells = f.shape[0] * f.shape[1];
  const count = range.tiles[1] - range.tiles[0];
  const sampled = new Set(sampleTiles(tileGrid(full)[0] * tileGrid(full)[1]));
  const out = { m: new Int32Array(count), n: new Int32Array(count), valid: new Int32Array(count), full: new Int32Array(count), held: new Int32Array(count) };
  const values: Float64Array[] = [];
  let total = 0;
  const sample_crc: [number, number][] = [];
  const { band, finish } = partBands(src, base, range, input);
  for (const { index, tile, m, n: cols } of tilesOf(band, spec)) {
    const t = range.tiles[0] + index;
    if (sampled.has(t)) sample_crc.push([t, tileCrc(tile)]);
    const first = firstPassTile(tile, m, cols, full, fill, f.tolerance, false);
    const held = cuttable(first.sv2, cells);
    [out.m[index], out.n[index], out.valid[index]] = first.dims;
    out.full[index] = first.sv2.length;
    out.held[index] = held.length;
    values.push(held);
    total += held.length;
  }
  finish();
  const flat = new Float64Array(total);
  let at = 0;
  for (const v of values) {
    flat.set(v, at);
    at += v.length;
  }
  return { pass: 'spectra', writer: WRITER, base, part: [k, n], tiles: range.tiles, ...out, values: flat, sample_crc };
}

/**
 * Merge the pieces of a spectra pass into the plan makePlan makes from the
 * same input: the L2 plan chosen from every tile's held spectrum, costed on
 * the sampled tiles read from `src` (the whole field's rows; only the
 * sampled tiles' bands are read).
 */
export function mergeSpectra(src: BandSource, pieces: { label: string; piece: PlanPiece }[], o: MergeOptions = {}): RunPlan {
  const ordered = inOrder<SpectraPiece>(pieces, 'spectra', (p) => (p as SpectraPiece).base.hash, 'bases (made by different range passes or options)');
  const base = ordered[0].piece.base;
  const f = base.field;
  const spec = planSpec(f);
  const [gr, gc] = tileGrid(spec);
  const spectra = new Spectra(gr * gc);
  const crcs = new Map<number, number>();
  for (const { label, piece } of ordered) {
    const want = partRange(base, piece.part[0], piece.part[1]).tiles;
    if (piece.tiles[0] !== want[0] || piece.tiles[1] !== want[1]) throw new InputError(InputCode.Option, `${label}: part ${piece.part.join('/')} holds tiles ${piece.tiles[0]}..${piece.tiles[1] - 1}, not tiles ${want[0]}..${want[1] - 1}`);
    let at = 0;
    for (let i = 0; i < piece.m.length; i++) {
      const t = piece.tiles[0] + i;
      const m = Math.min(spec.tileRows, spec.rows - Math.floor(t / gc) * spec.tileRows);
      const n = Math.min(spec.tileCols, spec.cols - (t % gc) * spec.tileCols);
      if (piece.m[i] !== m || piece.n[i] !== n || piece.valid[i] > m * n || piece.full[i] > Math.min(m, n) || piece.held[i] > piece.full[i]) {
        throw new InputError(InputCode.Option, `${label}: tile ${t} is not a ${m}x${n} tile of valid cells and singular values (${piece.m[i]}x${piece.n[i]}, ${piece.valid[i]} valid, ${piece.held[i]} of ${piece.full[i]} values)`);
      }
      spectra.add({ sv2: piece.values.subarray(at, at + piece.held[i]), dims: [m, n, piece.valid[i]] }, piece.full[i]);
      at += piece.held[i];
    }
    for (const [t, c] of piece.sample_crc) crcs.set(t, c);
  }
  const fill = fillWords(f.fill, f.dtype);
  const tol = f.tolerance;
  const input = o.input ?? base.source.file;
  const l2 = chooseL2(spectra, tol, (sample) => {
    const missing = sample.find((t) => !crcs.has(t));
    if (missing !== undefined) throw new InputError(InputCode.Option, `the pieces hold no CRC-32 of sampled tile ${missing}: make them again`);
    return readTiles(src, spec, fill, sample, tol, (t, tile) => {
      if (tileCrc(tile) !== crcs.get(t)) throw new InputError(InputCode.File, `${input}: tile ${t} differs from the one the spectra pass read (CRC-32): give the input the pieces were made from`);
    });
  });
  const req = { page: f.page, nd: f.nd_shape ? { nd_shape: f.nd_shape, ...(f.dims ? { dims: f.dims } : {}), ...(f.layout ? { layout: f.layout } : {}) } : undefined, file: o.file ?? base.source.file, run: o.run };
  return finishPlan(req, spec, base.source.band_crc, { tol, range: f.range, pointwise: false }, l2);
}
