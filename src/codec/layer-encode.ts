/**
 * Computing and choosing a field layer (spec/FORMAT.md, "Field layer"; how
 * this encoder chooses it: section 19). The layer is a truncated SVD of the
 * whole field, streamed band by band, with balanced factors L = U sqrt(S)
 * and R = V sqrt(S); each factor is packed as an f64 field of its own under
 * an `abs` bound, in tiles aligned with the field's tile rows (left) and
 * tile columns (right), and the field's tiles then code their values minus
 * the term of the factors as the decoder decodes them.
 */
import { bandTruncatedSvd, type BandMatrix } from '../linalg/band-svd.js';
import { exponentOf } from '../linalg/pow2.js';
import { tileCount } from '../geometry.js';
import type { FloatArray } from '../types.js';
import { sampleCost, spreadSample, TILE_INDEX_BYTES } from './auto-tile.js';
import { encodeField, memoryBands, type EncodedTile, type FieldChoices, type FieldResult, type FieldSpec } from './field.js';
import type { FieldLayer } from './layer.js';
import { fieldStep } from './payload.js';
import { decodeTile } from './tile-decode.js';
import { missingTest, type BandSource } from './tiles.js';

/** A field's leading singular triplets as balanced factors, before quantization. */
export interface LayerFactors {
  /** Ranks computed (the largest any candidate asks for). */
  rank: number;
  /** Singular values, descending (of the field minus its mean, missing cells at the mean). */
  s: Float64Array;
  /** U sqrt(S): rows x rank, row-major (rows of the stacked field). */
  left: Float64Array;
  /** V sqrt(S): cols x rank, row-major. */
  right: Float64Array;
  /** Valid cells of the field. */
  valid: number;
}

/**
 * The field's leading `rank` singular triplets (see {@link LayerFactors}),
 * read band by band: one pass for the mean of the valid values (and one for
 * the largest deviation from it, unless the value `range` is given), then
 * the range finder's passes (bandTruncatedSvd, one power iteration: four). Missing
 * cells (fill value, NaN, infinities) count as the mean, for the SVD only;
 * the mean itself is left to the tiles' centres. Null when the field has no
 * valid value. Deterministic: the same factors for every thread count.
 */
export function fieldFactors(src: BandSource, spec: FieldSpec, rank: number, range: [number, number] | null = null): LayerFactors | null {
  const missing = missingTest(spec);
  const rows = (spec.slices ?? 1) * spec.rows;
  let sum = 0;
  let valid = 0;
  eachBand(src, spec, (_r0, values) => {
    for (let c = 0; c < values.length; c++) {
      if (missing(values[c])) continue;
      sum += values[c];
      valid++;
    }
  });
  if (valid === 0) return null;
  const mean = sum / valid;
  // Scale by a power of two near the largest deviation, so squares neither overflow nor underflow (as truncated.ts
  // does): from the value range when the range pass gave it, else from one more pass.
  let big = 0;
  if (range) big = Math.max(Math.abs(range[1] - mean), Math.abs(range[0] - mean));
  else {
    eachBand(src, spec, (_r0, values) => {
      for (let c = 0; c < values.length; c++) if (!missing(values[c])) big = Math.max(big, Math.abs(values[c] - mean));
    });
  }
  const e = big > 0 && Number.isFinite(big) ? exponentOf(big) : 0;
  const scale = 2 ** -e;
  let buf = new Float64Array(0);
  const a: BandMatrix = {
    rows,
    cols: spec.cols,
    bands: (visit) =>
      eachBand(src, spec, (r0, values) => {
        if (buf.length < values.length) buf = new Float64Array(values.length);
        for (let c = 0; c < values.length; c++) buf[c] = missing(values[c]) ? 0 : (values[c] - mean) * scale;
        visit(r0, values.length / spec.cols, buf);
      }),
  };
  const r = bandTruncatedSvd(a, rank, 1);
  const s = r.s.map((x) => x * 2 ** e);
  const root = s.map(Math.sqrt);
  const left = new Float64Array(rows * rank);
  for (let i = 0; i < rows; i++) for (let K = 0; K < rank; K++) left[i * rank + K] = r.u[i * rank + K] * root[K];
  const right = new Float64Array(spec.cols * rank);
  for (let j = 0; j < spec.cols; j++) for (let K = 0; K < rank; K++) right[j * rank + K] = r.v[j * rank + K] * root[K];
  return { rank, s, left, right, valid };
}

/** Bands of the field's tile rows, never across slices, in row order. */
function eachBand(src: BandSource, spec: FieldSpec, visit: (r0: number, values: FloatArray) => void): void {
  const total = (spec.slices ?? 1) * spec.rows;
  const step = Math.max(1, spec.tileRows);
  for (let r0 = 0, end = 0; r0 < total; r0 = end) {
    end = Math.min(total, r0 + step, (Math.floor(r0 / spec.rows) + 1) * spec.rows);
    visit(r0, src.band(r0, end - r0));
  }
}

/** The first `rank` columns of a rows x `from.rank` factor. */
function firstColumns(values: Float64Array, width: number, rank: number): Float64Array {
  if (rank === width) return values;
  const rows = values.length / width;
  const out = new Float64Array(rows * rank);
  for (let i = 0; i < rows; i++) for (let K = 0; K < rank; K++) out[i * rank + K] = values[i * width + K];
  return out;
}

/** One factor packed as a field of its own: its spec, payloads and result, and its values as a reader decodes them. */
export interface CodedFactor {
  spec: FieldSpec;
  tiles: EncodedTile[];
  result: FieldResult;
  decoded: Float64Array;
  /** Payload bytes and about 20 index bytes a tile (as the tile trial counts them). */
  bytes: number;
}

/** A layer ready to write: its two factor fields, and the layer the field's tiles are coded against. */
export interface CodedLayer {
  left: CodedFactor;
  right: CodedFactor;
  layer: FieldLayer;
  /** Both factors' bytes. */
  bytes: number;
}

/**
 * Pack one factor (rows x rank) as an f64 field under `abs:tol`, in tiles
 * of `tileRows` rows and every column; its values decoded from the payloads
 * with the decoder's own code.
 */
export function packFactor(values: Float64Array, rows: number, rank: number, tileRows: number, tol: number, name: string): CodedFactor {
  const spec: FieldSpec = { name, dtype: 'f64', rows, cols: rank, tileRows: Math.min(tileRows, rows), tileCols: rank, bound: { mode: 'abs', value: tol }, fill: null, slices: 1, autoTile: false, progressive: false, guardFill: false };
  const tiles: EncodedTile[] = [];
  const decoded = new Float64Array(rows * rank);
  const step = fieldStep(tol);
  let bytes = 0;
  const result = encodeField(memoryBands(values, rank), spec, (t, tile) => {
    tiles.push(tile);
    bytes += tile.payload.length + TILE_INDEX_BYTES;
    const r0 = t * spec.tileRows;
    const m = Math.min(spec.tileRows, rows - r0);
    decoded.set(decodeTile(tile.payload, { m, n: rank, dtype: 'f64', fill: null, where: `factor field '${name}' tile ${t}`, fieldStep: step, symbols: true }), r0 * rank);
  });
  return { spec, tiles, result, decoded, bytes };
}

/** Root mean square of a factor's entries (0 for none). */
function rms(values: Float64Array): number {
  let s = 0;
  for (const v of values) s += v * v;
  return values.length > 0 ? Math.sqrt(s / values.length) : 0;
}

/**
 * Values a factor tile holds at least: its fixed costs (payload head, index
 * entry: some 20 to 40 bytes) then weigh little beside its codes, and a
 * window reads at most about this many values of each factor beyond the rows
 * it needs (common practice, no source, for the figure). On bench/'s
 * basin-stack (128 x 6144, 64 x 64 tiles, psnr:60, rank 4) factor tiles of
 * 64 rows made a 24674-byte archive, of 256 rows 21630, of 1024 rows 20831.
 */
const FACTOR_TILE_VALUES = 1024;

/** Rows of a factor tile: a power-of-two number of the field's tile rows (or columns), so that factor tiles stay aligned with the field's, holding at least {@link FACTOR_TILE_VALUES} values. */
export function factorTileRows(side: number, rank: number, rows: number): number {
  let g = 1;
  while (g * side * rank < FACTOR_TILE_VALUES && g * side < rows) g *= 2;
  return Math.min(g * side, rows);
}

/**
 * The factor fields of the layer of rank `rank` (at most `f.rank`). An error
 * e in every left entry moves a cell's term by about e x rms x sqrt(rank),
 * rms the right factor's RMS (from memory, the sum of `rank` products), so
 * `c` is the share of the field's tolerance the factors' rounding may spend
 * (within a few times; the tiles code what is left either way). That share is
 * split between the factors in proportion to the square root of their row
 * counts, each factor's abs bound `c x tol x sqrt(2 n / (nL + nR)) / (rms x
 * sqrt(rank))`: with bits about n log2(1 / step) per factor and the two
 * errors adding in quadrature, a Lagrange multiplier gives step^2 in
 * proportion to n (from memory); equal row counts give each factor `c x tol`.
 */
export function codeLayer(f: LayerFactors, rank: number, spec: FieldSpec, tol: number, c: number, names: [string, string]): CodedLayer {
  const left = firstColumns(f.left, f.rank, rank);
  const right = firstColumns(f.right, f.rank, rank);
  const rows = (spec.slices ?? 1) * spec.rows;
  const factorTol = (other: Float64Array, n: number) => {
    const e = (c * tol * Math.sqrt((2 * n) / (rows + spec.cols))) / (rms(other) * Math.sqrt(rank));
    // A zero factor, or a zero tolerance, leaves no sensible share: the smallest or largest abs bound the format takes.
    return Math.min(Number.MAX_VALUE, Math.max(Number.MIN_VALUE, Number.isNaN(e) ? Number.MIN_VALUE : e));
  };
  const l = packFactor(left, rows, rank, factorTileRows(spec.tileRows, rank, rows), factorTol(right, rows), names[0]);
  const r = packFactor(right, spec.cols, rank, factorTileRows(spec.tileCols, rank, spec.cols), factorTol(left, spec.cols), names[1]);
  return { left: l, right: r, layer: { rank, left: l.decoded, right: r.decoded }, bytes: l.bytes + r.bytes };
}

/** Ranks 'auto' tries against no layer. */
const AUTO_RANKS = [1, 2, 4, 8];
/** Shares `c` of the tolerance tried for the factors' bounds: 1 while ranks are compared, then the others for the rank kept. */
const FACTOR_SHARES = [1, 0.5, 2];
/**
 * How much smaller than no layer a layer's estimate must be for 'auto' to keep
 * it. The estimate is a sample's: on bench/'s large field (4096 x 4096, 1024 x
 * 1024 tiles, rel:1e-3) 4 of the 16 tiles estimated 57516 bytes without a
 * layer and 54690 with rank 1, where the whole field packed 53563 and 58612.
 */
const AUTO_MARGIN = 0.1;
/** Tiles of the field sampled per candidate at most (whole tiles, spread over the first slice). */
const SAMPLE_TILES = 16;
/**
 * 'auto' is not tried on fields of fewer tiles than this: one tile's own SVD
 * is the layer already, and on a few tiles the factors' fixed costs weigh
 * more than what they could save (common practice, no source, for the figure).
 */
export const MIN_LAYER_TILES = 4;

/** What {@link chooseLayer} decided, with the estimates it compared (bytes, by candidate). */
export interface LayerChoice {
  coded: CodedLayer | null;
  /** Estimated bytes of each candidate tried: 'none', or 'rank R share C'. */
  tried: [string, number][];
}

/**
 * Choose the layer by bytes on a sample: for each candidate (no layer, and
 * each rank of `ranks`) the factor fields' real bytes plus the remainder's
 * sampled tiles packed for real, scaled to the field's valid cells; the
 * smallest wins, a layer only by {@link AUTO_MARGIN}. `want`: 'auto', or a
 * rank given by the caller, which is kept whatever the estimate (only the
 * factors' share is chosen).
 * `basis`: the field's range pass. Null layer when nothing beats none.
 */
export function chooseLayer(src: BandSource, spec: FieldSpec, basis: FieldChoices, want: 'auto' | number, names: [string, string]): LayerChoice {
  const rows = (spec.slices ?? 1) * spec.rows;
  const most = Math.min(rows, spec.cols);
  const ranks = want === 'auto' ? AUTO_RANKS.filter((r) => r <= most) : [want];
  const tried: [string, number][] = [];
  if (ranks.length === 0) return { coded: null, tried };
  const f = fieldFactors(src, spec, Math.max(...ranks), basis.range);
  if (f === null) return { coded: null, tried };
  const m = Math.min(spec.tileRows, spec.rows);
  const n = Math.min(spec.tileCols, spec.cols);
  // At most a quarter of the first slice's whole tiles (at least 2): each candidate packs the sample again.
  const picked = spreadSample(spec, m, n, Math.min(SAMPLE_TILES, Math.max(2, Math.floor((Math.floor(spec.rows / m) * Math.floor(spec.cols / n)) / 4))));
  // The first slice's tiles, as the tile trial samples them.
  const first: FieldSpec = { ...spec, slices: 1 };
  const remainder = (layer: FieldLayer | undefined) => {
    const t = sampleCost(src, layer ? { ...first, layer } : first, basis, m, n, picked);
    return (t.bytes / Math.max(1, t.valid)) * f.valid;
  };
  let best: { coded: CodedLayer | null; bytes: number } = { coded: null, bytes: Infinity };
  if (want === 'auto') {
    const none = remainder(undefined);
    tried.push(['none', none]);
    // A layer must estimate AUTO_MARGIN smaller than none to be kept: the sample's estimate is that far off.
    best.bytes = none * (1 - AUTO_MARGIN);
  }
  const consider = (rank: number, c: number) => {
    const coded = codeLayer(f, rank, spec, basis.tol, c, names);
    const bytes = coded.bytes + remainder(coded.layer);
    tried.push([`rank ${rank} share ${c}`, bytes]);
    if (bytes < best.bytes) best = { coded, bytes };
    return bytes;
  };
  // Ranks in increasing order, until one packs larger than the rank before it (past rank 1, whose factors'
  // fixed costs may outweigh what it saves while higher ranks still gain: sizes then fall, and rise again).
  let previous = Infinity;
  for (const r of ranks) {
    const bytes = consider(r, FACTOR_SHARES[0]);
    if (want === 'auto' && r > 1 && bytes > previous) break;
    previous = bytes;
  }
  const kept = best.coded?.layer.rank;
  if (kept !== undefined) for (const c of FACTOR_SHARES.slice(1)) consider(kept, c);
  return { coded: best.coded, tried };
}

/** Whether 'auto' tries a layer on a field: a tolerance above zero and at least {@link MIN_LAYER_TILES} tiles. */
export function layerWorthTrying(spec: FieldSpec, tol: number): boolean {
  return tol > 0 && tileCount(spec) >= MIN_LAYER_TILES;
}
