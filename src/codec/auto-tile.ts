/**
 * Choosing a tile shape by trial: encode a sample of the field with each
 * candidate shape and keep the one that takes the fewest bytes. Larger tiles
 * capture low-rank structure that spans the field (a time x space matrix is
 * the clearest case); smaller tiles cost less to read through a window.
 */
import type { FloatArray } from '../types.js';
import type { Svd } from '../linalg/svd.js';
import { copyBlock } from '../geometry.js';
import { classify } from './mask.js';
import { candidatePlans, costPlans, costPlansAsync, l2Plan, type L2Plan, type L2PlanData } from './plan-l2.js';
import { firstPass, keepsTiles, type FirstPass, type TileSvds } from './first-pass.js';
import type { PreparedTile } from './prepare.js';
import { encodeField, encodeTile, fieldBasis, searchTile, termFor, tileToEncode, type BandSource, type FieldChoices, type FieldSpec, type TileOutcome, type TileSearch } from './field.js';

/** Square candidates, besides the whole sample when it fits in one tile. */
const SQUARE = [64, 128, 256];
/**
 * A larger square, tried on fields whose both sides reach
 * {@link LARGE_SIDE} (so that the trial's tiles are a small share of the
 * field). On smooth fields at loose bounds a tile's fixed cost (its index
 * entry and payload head, 30 to 45 bytes with format version 7: 44.5 a
 * tile on bench/'s smooth-front at rel:1e-3) is a large share of a
 * 256 x 256 tile's few hundred bytes.
 */
const LARGE_SQUARE = 512;
/** Both sides at least this for {@link LARGE_SQUARE} to be tried. */
const LARGE_SIDE = 1024;
/**
 * Larger still, on fields whose both sides reach {@link HUGE_SIDE}, and
 * only when {@link LARGE_SQUARE} has done best so far (a field that gains
 * nothing from 512 x 512 over smaller tiles is not tried on 1024 x 1024).
 * On bench/'s 4096 x 4096 large field at rel:1e-3, 1024 x 1024 tiles
 * packed 53637 bytes against 55892 with 512 x 512 (16 tiles instead of 64:
 * their fixed costs were 5% of the archive).
 */
const HUGE_SQUARE = 1024;
const HUGE_SIDE = 2048;
/** At most this many cells are sampled per candidate: fewer than {@link TRIAL_TILES} tiles of the largest squares. */
const TRIAL_CELLS = 1 << 22;
/** Largest whole-field tile tried (cells). */
export const WHOLE_CELLS = 1 << 18;
/**
 * A field at most this thin (a time x space matrix, a few levels of a
 * long section) is also tried with tiles across its whole short side and
 * about 512 to 4096 along the long one. Each length is the long side split evenly
 * into the whole number of parts nearest to it (6144 gives 512, 1024, 2048
 * and 3072), so that no thin tile is left over at the end, and at most
 * {@link MAX_STRIP} (the format allows tile sides up to 4096 in the writer).
 */
const THIN_SIDE = 256;
const THIN_LENGTHS = [512, 1024, 2048, 4096];
const MAX_STRIP = 4096;

/** Tile shapes tried for a field of rows x cols. */
export function tileCandidates(rows: number, cols: number): [number, number][] {
  const out: [number, number][] = [];
  const seen = new Set<string>();
  const add = (r: number, c: number) => {
    const t: [number, number] = [Math.min(r, rows), Math.min(c, cols)];
    const key = `${t[0]}x${t[1]}`;
    if (!seen.has(key)) {
      seen.add(key);
      out.push(t);
    }
  };
  for (const s of SQUARE) add(s, s);
  if (Math.min(rows, cols) >= LARGE_SIDE) add(LARGE_SQUARE, LARGE_SQUARE);
  if (Math.min(rows, cols) >= HUGE_SIDE) add(HUGE_SQUARE, HUGE_SQUARE);
  if (rows * cols <= WHOLE_CELLS) add(rows, cols);
  else if (Math.min(rows, cols) <= THIN_SIDE) {
    const long = Math.max(rows, cols);
    for (const l of THIN_LENGTHS) {
      const len = Math.ceil(long / Math.max(1, Math.round(long / l)));
      if (len <= MAX_STRIP) add(rows <= cols ? rows : len, rows <= cols ? len : cols);
    }
  }
  return out;
}

/** Tiles of one shape encoded per candidate; the trial extrapolates bytes per cell from them. */
const TRIAL_TILES = 8;

/**
 * The candidate tile shape that packs a sample of the field into the fewest
 * bytes per valid cell. Each candidate is tried on TRIAL_TILES of its whole
 * tiles spread evenly over the field (over the first slice of a field of
 * slices); a field with fewer whole tiles than that is tried on all of
 * them (a candidate as large as the field, on the whole field). The tiles
 * are read one band of tile rows at a time, so the trial holds a few
 * tiles, never the field.
 *
 * Under a pointwise bound each sampled tile is encoded with the field's
 * own basis (`basis`: its range and tolerance), exactly as the encoding
 * pass would encode it, and the winner's tiles are returned in
 * {@link TileTrial.done} for that pass to use as they are: where the
 * trial covered the whole field (a 1024 x 1024 field with 512 x 512
 * tiles) the field is encoded once, not twice. Under an L2 bound the
 * sampled tiles are laid side by side as one small field and packed with
 * its own plan (the field's plan spreads its error budget over all tiles,
 * so a tile's payload depends on the others).
 *
 * Spreading the tiles matters: on bench/'s large field the top 1024 rows
 * favoured 256 x 256 tiles while 512 x 512 packed the whole field 23%
 * smaller (measured at rel:1e-3).
 */
export function chooseTile(src: BandSource, spec: FieldSpec, basis: FieldChoices): TileTrial {
  const choice = new TrialChoice(spec, largestFirst(spec), basis.pointwise && largestFirst(spec));
  for (const [m, n, picked] of trialSamples(spec)) {
    if (choice.worthTrying(m, n)) choice.add(m, n, sampleCost(src, spec, basis, m, n, picked, choice.beat, choice.stops));
  }
  return choice.result();
}

/**
 * What the whole tiles `picked` (row-major numbers of the m x n grid's whole
 * tiles) of a field cost, packed for real: under a pointwise bound each
 * tile encoded with the field's basis, under an L2 bound the tiles side by
 * side as one small field with its own plan (see {@link chooseTile}). The
 * field layer's term of each tile is taken off as the encoding pass takes it.
 * `beat`: the most bytes per valid cell that leave a candidate in the
 * running (see TrialChoice.beat); a trial that passes it stops early, its
 * bytes then only as many as it took to know (more than `beat` per valid
 * cell). `searched`: a pointwise tile counts what its search weighs (see
 * TileSearch in field.ts: its first candidate's bytes where its stream is
 * dense), weighed again by {@link Tried.settle} in a close call, and is
 * finished only by {@link Tried.finish} (the trial of a small field: see
 * {@link largestFirst}).
 */
export function sampleCost(src: BandSource, spec: FieldSpec, basis: FieldChoices, m: number, n: number, picked: readonly number[], beat = Infinity, searched = false): Tried {
  if (!basis.pointwise) return tryMosaic(src, spec, m, n, picked, basis, beat);
  const tiles = pickedTiles(src, spec, m, n, picked);
  // The valid cells of all the tiles, known before any is encoded (a pass over each), when a candidate may lose part way.
  const valid = beat < Infinity && tiles.length > 1 ? tiles.reduce((sum, t) => sum + t.m * t.n - classify(t.tile, basis.fill).special, 0) : -1;
  const tried: Tried = { bytes: 0, valid: 0, done: new Map() };
  const searches: [number, TileSearch][] = [];
  if (searched) {
    tried.finish = () => searches.forEach(([index, s]) => tried.done.set(index, s.finish()));
    tried.settle = () => searches.reduce((sum, [, s]) => sum + s.settled() + TILE_INDEX_BYTES, 0);
  }
  for (let k = 0; k < tiles.length; k++) {
    const t = tiles[k];
    const prepared = tileToEncode(basis, t.index, t.tile, m, n, t.term);
    if (searched) {
      const s = searchTile(basis, prepared, t.index);
      searches.push([t.index, s]);
      tried.bytes += s.bytes + TILE_INDEX_BYTES;
      tried.valid += prepared.valid;
    } else addOutcome(tried, t.index, encodeTile(basis, prepared, t.index), false);
    // Bytes only grow, and every tile left adds at least its index entry: once that passes the best rate
    // for all the tiles' valid cells, the candidate has lost (its rate is more than `beat` whatever the rest
    // take), and it stops with those bytes (see TrialChoice.add: a loser's tiles are not used).
    const least = tried.bytes + (tiles.length - 1 - k) * TILE_INDEX_BYTES;
    if (valid >= 0 && k + 1 < tiles.length && least / Math.max(1, valid) > beat) return { bytes: least, valid, done: tried.done };
  }
  return tried;
}

/** `count` whole tiles of a field's m x n grid spread over it (see {@link spreadTiles}), or every whole tile when there are no more. */
export function spreadSample(spec: FieldSpec, m: number, n: number, count: number): number[] {
  const gr = Math.floor(spec.rows / m);
  const gc = Math.floor(spec.cols / n);
  return gr * gc <= count ? Array.from({ length: gr * gc }, (_, k) => k) : spreadTiles(gr, gc, count);
}

/**
 * {@link chooseTile} with the sampled tiles of a pointwise trial encoded by
 * `encodeMany` (on worker threads); the same choice and the same tiles.
 * A trial that may stop early (largest first, see {@link largestFirst})
 * hands over the next candidate's tiles beside a candidate of one tile, so
 * the threads share out tiles of two shapes (a small field's largest
 * candidates have one tile each: one at a time, a thread of two sat idle
 * through them); that work is lost when the trial stops at the one tile.
 * Otherwise, when the candidates' samples together hold at most
 * {@link CONCURRENT_TRIAL_CELLS}, every candidate's tiles are handed over
 * at once; else one candidate at a time, so a few tiles are held at a
 * time. The candidates are weighed in their order either way (the huge
 * square after the others, see {@link TrialChoice.worthTrying}).
 */
export async function chooseTileAsync(src: BandSource, spec: FieldSpec, basis: FieldChoices, encodeMany: (tiles: PickedTile[]) => Promise<TileOutcome[]>, l2?: MosaicWork): Promise<TileTrial> {
  if (!basis.pointwise) return l2 ? chooseTileL2(src, spec, basis, l2) : chooseTile(src, spec, basis);
  const choice = new TrialChoice(spec, largestFirst(spec), largestFirst(spec));
  const samples = trialSamples(spec);
  const huge = (m: number, n: number) => m === HUGE_SQUARE && n === HUGE_SQUARE;
  const cells = samples.reduce((sum, [m, n, picked]) => sum + (huge(m, n) ? 0 : m * n * picked.length), 0);
  // Candidates started beyond the one weighed: in a trial that may stop early, the next one beside a one-tile candidate (its work is lost
  // if the trial stops there); else all or none.
  const ahead = (k: number) => (choice.stops ? (samples[k][2].length === 1 ? 1 : 0) : cells <= CONCURRENT_TRIAL_CELLS ? samples.length : 0);
  const started: (Promise<Tried> | undefined)[] = [];
  const start = (k: number): Promise<Tried> => {
    if (started[k] === undefined) {
      const [m, n, picked] = samples[k];
      const tiles = pickedTiles(src, spec, m, n, picked);
      // The indices first: encodeMany may hand the tiles' buffers over to other threads.
      const indices = tiles.map((t) => t.index);
      started[k] = encodeMany(tiles).then((outcomes) => tally(indices, outcomes, choice.stops));
      // Awaited in order below, or never; a failure meanwhile must not go unhandled.
      started[k].catch(() => undefined);
    }
    return started[k];
  };
  for (let k = 0; k < samples.length; k++) {
    const [m, n] = samples[k];
    if (!choice.worthTrying(m, n)) continue;
    const current = start(k);
    // The huge square is started only when it is weighed (after the large square did best).
    for (let j = k + 1; j <= Math.min(k + ahead(k), samples.length - 1); j++) if (!huge(samples[j][0], samples[j][1])) start(j);
    choice.add(m, n, await current);
  }
  return choice.result();
}

/** Most cells of the candidates' samples that {@link chooseTileAsync} encodes at once: as many as one candidate's sample may hold. */
const CONCURRENT_TRIAL_CELLS = TRIAL_CELLS;

/**
 * Each candidate shape with the whole tiles its trial samples: every whole
 * tile, or TRIAL_TILES of them (fewer for tiles so large that TRIAL_CELLS
 * allows fewer, at least 2), in row-major order.
 */
function trialSamples(spec: FieldSpec): [number, number, number[]][] {
  const shapes = tileCandidates(spec.rows, spec.cols);
  // Largest first (a stable sort: equal areas keep their order).
  if (largestFirst(spec)) shapes.sort((a, b) => b[0] * b[1] - a[0] * a[1]);
  return shapes.map(([m, n]) => [m, n, spreadSample(spec, m, n, Math.min(TRIAL_TILES, Math.max(2, Math.floor(TRIAL_CELLS / (m * n)))))]);
}

/**
 * Whether a field's trial weighs its candidates largest first and stops at
 * the first that does worse than the best so far: fields of at most
 * {@link WHOLE_CELLS}, whose
 * candidates include the whole field as one tile. The whole field comes
 * first, so that when it wins, its trial has made the archive's only
 * payload (see {@link TileTrial.done}); and a field's bytes per cell fall
 * as tiles grow until their structure is local, then rise, so smaller
 * tiles than one that already did worse are not tried. Every candidate's
 * sample cost measured on bench/'s fields at the bench bounds (rel:1e-2,
 * 1e-3, 1e-4, psnr:40, 60, 80; the 8 quick fields and the 512 x 512 ones
 * of the full run: 72 cases): the rule chose the shape that trying every
 * candidate chooses in all of them, encoding 0.78 to 0.81 of the cells;
 * stopping only at a candidate 2% worse than the best, 0.82 on the quick
 * fields (turbulence's 128 x 128 tiles did 0.6% worse than 256 x 256 at
 * rel:1e-3, and 64 x 64 worse still).
 * Thin fields (a side of at most {@link THIN_SIDE}: time x space
 * matrices, long sections) are weighed the same way, longest strip first:
 * measured on bench/'s basin-stack (128 x 6144) and turbulence-stack
 * (32 x 16384) at the six bench bounds (scratch measurement, issue 10:
 * every candidate's sample cost, finished and searched), the rule chose
 * the shape the exhaustive trial chooses in all 12 cases, for 0.46 to 0.70
 * of its time (the long strips' samples cover the whole field, and they
 * won or came within a few per cent of winning everywhere).
 * Other large fields keep the ascending order (the huge square is tried
 * only after the large one did best).
 */
function largestFirst(spec: FieldSpec): boolean {
  return spec.rows * spec.cols <= WHOLE_CELLS || Math.min(spec.rows, spec.cols) <= THIN_SIDE;
}

/**
 * `count` distinct tiles of a gr x gc grid (fewer than gr x gc), as
 * row-major numbers in increasing order, spread over both the tile rows and
 * the tile columns: sample k lies in row stratum k and in column stratum
 * (3k mod count), a Latin-hypercube layout (each row stratum and each column
 * stratum holds one sample; 3 is coprime with every count used, 2 to 8, except
 * 3 and 6, where 5 is used). Spreading in row-major order alone put every
 * sample in one column whenever the count divided the grid's width (16
 * tiles across and 8 samples: column 0 of every other row), and on bench/'s
 * 4096 x 4096 large field at rel:1e-2 the trial then chose 256 x 256 tiles
 * (29480 bytes) over 1024 x 1024 (18349 bytes). Samples that fall on one
 * tile (a grid narrower than the count both ways) move to the next
 * unused tile in row-major order.
 */
export function spreadTiles(gr: number, gc: number, count: number): number[] {
  const step = count % 3 === 0 ? 5 : 3;
  const picked = new Set<number>();
  for (let k = 0; k < count; k++) {
    const i = Math.floor(((k + 0.5) * gr) / count);
    const j = Math.floor(((((k * step) % count) + 0.5) * gc) / count);
    let t = i * gc + j;
    while (picked.has(t)) t = (t + 1) % (gr * gc);
    picked.add(t);
  }
  return [...picked].sort((a, b) => a - b);
}

/**
 * Two candidates whose weights are within this share of each other are
 * weighed again by their tiles' smallest candidates (see
 * {@link Tried.settle}): a weight that counts a tile's first candidate
 * alone stood up to 3.9% above the smallest's (see DENSE_BITS in
 * pointwise-search.ts). On bench/'s turbulence-stack at rel:1e-2 the trial's
 * 32 x 4096 and 32 x 2048 tiles weighed 264.7 and 266.2 bytes a thousand
 * cells by their smallest candidates, 269.9 and 269.7 by their first; the
 * first weights alone chose 32 x 2048, 140112 bytes against 138863
 * (scratch measurement).
 */
const CLOSE_CALL = 0.02;

/** The best candidate so far: fewest bytes per valid cell (candidates sample different tiles, and missing cells cost next to nothing). */
class TrialChoice {
  best: TileTrial;
  /** The best candidate's bytes per valid cell (Infinity before the first). */
  rate = Infinity;
  private stopped = false;
  private finishBest: (() => void) | undefined;
  /** The best candidate's {@link Tried.settle}, until called; and its valid cells. */
  private settleBest: (() => number) | undefined;
  private bestValid = 0;
  /**
   * @param stops the candidates come largest first, and the trial stops at the first that does clearly worse (see {@link largestFirst}).
   * @param settles the candidates' weights may count more than their tiles' smallest candidates (see {@link Tried.settle}): close calls are weighed again.
   */
  constructor(spec: FieldSpec, readonly stops: boolean, private readonly settles = false) {
    this.best = { shape: [spec.tileRows, spec.tileCols], done: new Map() };
  }
  /** The bytes per valid cell that a candidate must reach to be weighed in full (a close call included): more, and it has lost. */
  get beat(): number {
    return this.settles ? this.rate * (1 + CLOSE_CALL) : this.rate;
  }
  /** Whether candidate m x n is tried: none once the trial stopped; the huge square only after the large one did best so far. */
  worthTrying(m: number, n: number): boolean {
    if (this.stopped) return false;
    return !(m === HUGE_SQUARE && n === HUGE_SQUARE) || (this.best.shape[0] === LARGE_SQUARE && this.best.shape[1] === LARGE_SQUARE);
  }
  add(m: number, n: number, tried: Tried): void {
    const valid = Math.max(1, tried.valid);
    let rate = tried.bytes / valid;
    let settle = tried.settle;
    // A close call is weighed again by the smallest candidates, where a weight may stand above them.
    if (this.settles && rate <= this.beat && this.rate <= rate * (1 + CLOSE_CALL)) {
      if (settle) rate = settle() / valid;
      settle = undefined;
      if (this.settleBest) this.rate = this.settleBest() / this.bestValid;
      this.settleBest = undefined;
    }
    if (this.stops && rate > this.rate) this.stopped = true;
    if (rate < this.rate) {
      this.rate = rate;
      this.best = { shape: [m, n], done: tried.done, ...(tried.plan ? { plan: tried.plan } : {}), ...(tried.spectra ? { spectra: tried.spectra } : {}), ...(tried.svds ? { svds: tried.svds } : {}) };
      this.finishBest = tried.finish;
      this.settleBest = settle;
      this.bestValid = valid;
    }
  }
  /** The choice, with the best candidate's tiles finished. */
  result(): TileTrial {
    this.finishBest?.();
    return this.best;
  }
}

/** The tile shape a trial chose, and the tiles of that shape it encoded as the field's own (by tile index). */
export interface TileTrial {
  shape: [number, number];
  done: Map<number, TileOutcome>;
  /** Under an L2 bound, the plan of a trial whose small field was the first slice itself (see tryMosaic and FieldPrior). */
  plan?: L2Plan;
  /** Under an L2 bound, the singular values of the sampled tiles, by the field's tile index (see FieldPrior). */
  spectra?: ReadonlyMap<number, Float64Array>;
  /** Under an L2 bound, the SVDs computed of the sampled tiles without missing cells, by the field's tile index (see FieldPrior). */
  svds?: TileSvds;
}

/** What one candidate's sample cost. */
export interface Tried {
  bytes: number;
  valid: number;
  done: Map<number, TileOutcome>;
  /** Fills `done` with the tiles, when they were searched but not finished (see {@link sampleCost}). */
  finish?: () => void;
  /**
   * The bytes as the tiles' smallest candidates count them, where `bytes`
   * may count more (see TileSearch: a searched tile's first candidate):
   * the others coded now.
   */
  settle?: () => number;
  plan?: L2Plan;
  spectra?: ReadonlyMap<number, Float64Array>;
  svds?: TileSvds;
}

/** Tiles `picked` (row-major whole-tile numbers of an m x n grid) with their field tile index, read one band of tile rows at a time. */
function eachPicked(src: BandSource, spec: FieldSpec, m: number, n: number, picked: readonly number[], visit: (k: number, band: FloatArray, j0: number, index: number) => void): void {
  const gc = Math.floor(spec.cols / n);
  // The field's grid counts the partial tile at the right edge too.
  const fieldCols = Math.ceil(spec.cols / n);
  let k = 0;
  while (k < picked.length) {
    const ti = Math.floor(picked[k] / gc);
    const band = src.band(ti * m, m);
    for (; k < picked.length && Math.floor(picked[k] / gc) === ti; k++) {
      const tj = picked[k] % gc;
      visit(k, band, tj * n, ti * fieldCols + tj);
    }
  }
}

/** A sampled tile: its field tile index and values (a copy of its own), and the field layer's term for it (null without a layer). */
export interface PickedTile {
  index: number;
  tile: FloatArray;
  m: number;
  n: number;
  term: Float64Array | null;
}

/** The picked tiles of an m x n grid, copied out of their bands. */
function pickedTiles(src: BandSource, spec: FieldSpec, m: number, n: number, picked: readonly number[]): PickedTile[] {
  const out: PickedTile[] = [];
  // The candidate's own grid, for the layer's term of each tile.
  const grid: FieldSpec = { ...spec, tileRows: m, tileCols: n };
  eachPicked(src, spec, m, n, picked, (_k, band, j0, index) => {
    const tile = spec.dtype === 'f32' ? new Float32Array(m * n) : new Float64Array(m * n);
    copyBlock(band, spec.cols, 0, j0, m, n, tile, n, 0, 0);
    out.push({ index, tile, m, n, term: termFor(grid, index, m, n) });
  });
  return out;
}

/** A pointwise trial's cost: its tiles' payloads (or their searches' bytes, `searched`: see {@link sampleCost}) and index entries, and the tiles by index. */
function tally(indices: readonly number[], outcomes: readonly TileOutcome[], searched: boolean): Tried {
  const tried: Tried = { bytes: 0, valid: 0, done: new Map() };
  outcomes.forEach((o, k) => addOutcome(tried, indices[k], o, searched));
  if (searched) tried.settle = () => outcomes.reduce((sum, o) => sum + o.settled + TILE_INDEX_BYTES, 0);
  return tried;
}

/** Count one encoded tile into a pointwise trial's cost. */
function addOutcome(tried: Tried, index: number, o: TileOutcome, searched: boolean): void {
  tried.bytes += (searched ? o.searched : o.payload.length) + TILE_INDEX_BYTES;
  tried.valid += o.valid;
  tried.done.set(index, o);
}

/**
 * An L2 trial: the picked tiles side by side as one small field, with its
 * own basis and first pass, costed as the plan choice costs its candidate
 * plans (on every tile of the small field): the cheapest plan's bytes. A
 * small field whose first pass does not keep its tiles, or that has one
 * candidate plan, is packed whole instead. When the small field is the
 * first slice itself (of the field's own tolerance, `field`): one tile, or
 * every tile of a field one tile high, each whole and in its place,
 * its plan is the one the field's planning pass would make from the same
 * first pass and tiles (the costing's sample is every tile either way:
 * a trial samples at most {@link TRIAL_TILES}), and is returned for it,
 * with the tiles and the payloads the costing made of them. On bench/'s
 * basin-stack at psnr:80 (128 x 6144, 128 x 3072 tiles chosen), the field's
 * own plan made again cost about a quarter of the pack.
 */
function tryMosaic(src: BandSource, spec: FieldSpec, m: number, n: number, picked: readonly number[], field: FieldChoices, beat: number): Tried {
  const mo = mosaicOf(src, spec, m, n, picked);
  if (mo.planned) {
    const spectra = new Map<number, Float64Array>();
    const first = firstPass(mo.src, mo.spec, mo.basis.tol, mo.basis.fill, undefined, (k, s) => spectra.set(mo.fieldIndex[k], s));
    const plans = candidatePlans(first.spectra, mo.basis.tol);
    if (plans.length > 1) return mosaicCost(mo, first, spectra, field, costPlans(plans, mo.all, first.kept, first.spectra, mosaicLoses(mo, first, beat)));
  }
  return mosaicPacked(mo);
}

/**
 * What an L2 trial's first pass and costing need from other threads: a
 * first pass over a small field on them (each tile's singular values
 * handed to `seen`, by the small field's tile index), and the costing of
 * candidate plans on them (the `cost` of costPlansAsync, `ahead` tiles
 * ahead; `done` when the costing is over).
 */
export interface MosaicWork {
  firstPass(src: BandSource, spec: FieldSpec, tol: number, fill: Uint32Array | null, seen: (k: number, s: Float64Array) => void): Promise<FirstPass>;
  costing(plans: L2PlanData[], sample: number[], tiles: PreparedTile[]): { cost: (k: number, ats: number[]) => Promise<number[]>; done: () => Promise<void> };
  ahead: number;
}

/** {@link chooseTile} under an L2 bound with each mosaic's first pass and costing on other threads (`work`): the same choice. */
async function chooseTileL2(src: BandSource, spec: FieldSpec, basis: FieldChoices, work: MosaicWork): Promise<TileTrial> {
  const choice = new TrialChoice(spec, largestFirst(spec));
  for (const [m, n, picked] of trialSamples(spec)) {
    if (choice.worthTrying(m, n)) choice.add(m, n, await tryMosaicAsync(src, spec, m, n, picked, basis, choice.rate, work));
  }
  return choice.result();
}

/** {@link tryMosaic} with the first pass and the costing on other threads: the same result. */
async function tryMosaicAsync(src: BandSource, spec: FieldSpec, m: number, n: number, picked: readonly number[], field: FieldChoices, beat: number, work: MosaicWork): Promise<Tried> {
  const mo = mosaicOf(src, spec, m, n, picked);
  if (mo.planned) {
    const spectra = new Map<number, Float64Array>();
    const first = await work.firstPass(mo.src, mo.spec, mo.basis.tol, mo.basis.fill, (k, s) => spectra.set(mo.fieldIndex[k], s));
    const plans = candidatePlans(first.spectra, mo.basis.tol);
    if (plans.length > 1) {
      const c = work.costing(plans, mo.all, first.kept);
      try {
        return mosaicCost(mo, first, spectra, field, await costPlansAsync(plans, mo.all, first.kept, c.cost, work.ahead, first.spectra, mosaicLoses(mo, first, beat)));
      } finally {
        await c.done();
      }
    }
  }
  return mosaicPacked(mo);
}

/** An L2 trial's small field: the picked tiles side by side, its basis, and where each tile lies in the field. */
interface Mosaic {
  src: BandSource;
  spec: FieldSpec;
  basis: FieldChoices;
  /** The field's tile index of each tile of the small field. */
  fieldIndex: number[];
  /** Every tile of the small field, in order (the costing's sample). */
  all: number[];
  /** Whether it is planned (an L2 basis, tiles kept): else packed whole. */
  planned: boolean;
  /** Whether the small field is the field's first slice itself, laid out as it (see {@link tryMosaic}). */
  whole: boolean;
}

function mosaicOf(src: BandSource, spec: FieldSpec, m: number, n: number, picked: readonly number[]): Mosaic {
  const width = picked.length * n;
  const mosaic = spec.dtype === 'f32' ? new Float32Array(m * width) : new Float64Array(m * width);
  const fieldIndex: number[] = [];
  // Where each tile's cells lie in the field (for the layer's term).
  const origins = new Int32Array(2 * picked.length);
  const gc = Math.ceil(spec.cols / n);
  eachPicked(src, spec, m, n, picked, (k, band, j0, index) => {
    copyBlock(band, spec.cols, 0, j0, m, n, mosaic, width, 0, k * n);
    fieldIndex[k] = index;
    origins[2 * k] = Math.floor(index / gc) * m;
    origins[2 * k + 1] = j0;
  });
  const trialSrc: BandSource = { band: (r0, count) => mosaic.subarray(r0 * width, (r0 + count) * width) };
  const trial: FieldSpec = { ...spec, rows: m, cols: width, tileRows: m, tileCols: n, autoTile: false, guardFill: false, ...(spec.layer ? { layerOrigins: origins } : {}) }; // the field's own pass guards
  const basis = fieldBasis(trialSrc, trial);
  const all = Array.from({ length: picked.length }, (_, k) => k);
  return { src: trialSrc, spec: trial, basis, fieldIndex, all, planned: !basis.pointwise && keepsTiles(trial), whole: m === spec.rows && picked.length * n === spec.cols };
}

/** Bytes that could not beat the best candidate so far end the costing (the same comparison as TrialChoice.add). */
function mosaicLoses(mo: Mosaic, first: FirstPass, beat: number): (bytes: number) => boolean {
  const valid = first.spectra.valid.reduce((a, b) => a + b, 0);
  return (bytes) => (bytes + mo.all.length * TILE_INDEX_BYTES) / Math.max(1, valid) > beat;
}

/** A planned trial's cost from its costing, with the spectra and SVDs (and plan) the field's passes take. */
function mosaicCost(mo: Mosaic, first: FirstPass, spectra: Map<number, Float64Array>, field: FieldChoices, costed: { plan: L2PlanData; bytes: number }): Tried {
  const tiles = mo.all.length;
  const valid = first.spectra.valid.reduce((a, b) => a + b, 0);
  const plan = mo.whole && mo.basis.tol === field.tol ? l2Plan(costed.plan, mo.basis.fill, (index) => first.kept[index]) : undefined;
  // The SVDs the costing computed, for the field's passes to take: of tiles without missing cells (and no layer), whose
  // centred values do not depend on the tolerance, which the small field's range may set otherwise than the field's.
  const svds = new Map<number, Map<number, Svd>>();
  first.kept.forEach((t, k) => {
    if (t.classes.special === 0 && t.layer === null && t.svds.size > 0) svds.set(mo.fieldIndex[k], t.svds);
  });
  return { bytes: costed.bytes + tiles * TILE_INDEX_BYTES, valid, done: new Map(), spectra, svds, ...(plan ? { plan } : {}) };
}

/** A trial's small field packed whole (a pointwise basis, tiles not kept, or one candidate plan). */
function mosaicPacked(mo: Mosaic): Tried {
  let bytes = 0;
  // The basis made above, not a second range pass over the small field.
  const done = encodeField(mo.src, mo.spec, (_t, tile) => (bytes += tile.payload.length + TILE_INDEX_BYTES), { basis: mo.basis, done: new Map() });
  return { bytes, valid: done.valid, done: new Map() };
}

/**
 * About what one tile adds to the index (spec/FORMAT.md, section 7.3): a
 * length varint (2), two CRCs (8), kind and missing count (2), two binary32
 * errors (8); measured 19.3 to 21.6 bytes a tile with 64 x 64 tiles on the
 * bench fields at rel:1e-3.
 */
export const TILE_INDEX_BYTES = 20;
