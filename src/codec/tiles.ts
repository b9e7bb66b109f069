/**
 * A field being encoded: its spec, the band source it is read from, and the
 * walk over its tiles (the grid itself is in geometry.ts).
 */
import { cutBlock, tileGrid, tileIndex, type SpecGrid } from '../geometry.js';
import type { Bound, Dtype, FloatArray } from '../types.js';
import { layerTerm, tileLayerTerm, type FieldLayer } from './layer.js';
import { fillWords } from './mask.js';

// The tile grid is geometry.ts's; plan-l2.ts and parts/plan.ts take it from here.
export { tileGrid } from '../geometry.js';

/**
 * What the encoder needs to know about a field. Not the header's FieldHeader:
 * that one holds the file's keys and what the encoding found (range,
 * tolerance); this one the caller's choices (a Bound, the trial, the guard).
 */
export interface FieldSpec extends SpecGrid {
  name: string;
  dtype: Dtype;
  bound: Bound;
  fill: number | null;
  /** Choose the tile shape by trial (see auto-tile.ts); tileRows/tileCols are then replaced. */
  autoTile?: boolean;
  /** Store factors in groups of ranks 1, 1, 2, 4, ... so readers can stop after any group (costs bytes). */
  progressive?: boolean;
  /** Refuse a value that looks like an undeclared fill value (see fill-guard.ts), seen in the range pass. */
  guardFill?: boolean;
  /**
   * Slices of rows x cols stacked in the field (default 1). The source then
   * serves rows of the stacked (slices x rows) x cols matrix: rows
   * [s * rows, (s + 1) * rows) are slice s. Tiles never cross slices.
   */
  slices?: number;
  /**
   * The field layer (see layer.ts and layer-encode.ts), as the decoder will
   * decode its factors: every tile codes its values minus the layer's term.
   */
  layer?: FieldLayer;
  /**
   * Where each tile's cells lie in the stacked field the layer covers, as
   * [row, column] pairs by tile index, when the tiles are not the field's
   * own grid (the tile trial's small field of sampled tiles); by default a
   * tile's place in this grid.
   */
  layerOrigins?: Int32Array;
}

/** The layer's term for tile `index` (m x n) of a field, or null when the field has no layer. */
export function termFor(spec: FieldSpec, index: number, m: number, n: number): Float64Array | null {
  const layer = spec.layer;
  if (!layer) return null;
  if (spec.layerOrigins) return layerTerm(layer.rank, layer.left, 0, layer.right, 0, spec.layerOrigins[2 * index], spec.layerOrigins[2 * index + 1], m, n);
  return tileLayerTerm(layer, spec, index, m, n);
}

/**
 * Whether a value of the field is missing (NaN, an infinity, or the fill
 * value in the field's dtype): the cells the bound and the value range leave out.
 */
export function missingTest(spec: Pick<FieldSpec, 'fill' | 'dtype'>): (v: number) => boolean {
  const fw = fillWords(spec.fill, spec.dtype);
  const f = fw === null ? NaN : spec.dtype === 'f32' ? Math.fround(spec.fill as number) : (spec.fill as number);
  return (v) => !Number.isFinite(v) || (v === f && Object.is(v, f));
}

/**
 * Where the encoder reads a field from: bands of whole rows, so a field
 * larger than memory can be packed one band of tiles at a time.
 */
export interface BandSource {
  /**
   * Rows [r0, r0 + count) as row-major values of the field's dtype. The
   * encoder is done with a band (its tiles copied out, its values counted)
   * before it asks for the next, so a source may hand out views of one
   * buffer that it fills again at every call.
   */
  band(r0: number, count: number): FloatArray;
}

/** A band source over a field already in memory. */
export function memoryBands(values: FloatArray, cols: number): BandSource {
  return { band: (r0, count) => values.subarray(r0 * cols, (r0 + count) * cols) };
}

/** The values of a tile {@link tilesOf} was told to skip. */
const SKIPPED = new Float64Array(0);

/**
 * Every tile in index order (slice by slice, row-major within a slice:
 * t = s * gr * gc + ti * gc + tj), reading one band of rows per tile row
 * when the first tile of that row is asked for. A tile `skip` names (one
 * encoded already) is not cut out: its `tile` is empty.
 */
export function* tilesOf(src: BandSource, spec: FieldSpec, skip?: (index: number) => boolean): Generator<{ index: number; tile: FloatArray; m: number; n: number }> {
  const [gr, gc] = tileGrid(spec);
  const slices = spec.slices ?? 1;
  for (let s = 0; s < slices; s++) {
    for (let ti = 0; ti < gr; ti++) {
      const r0 = ti * spec.tileRows;
      const rows = Math.min(spec.tileRows, spec.rows - r0);
      const band = src.band(s * spec.rows + r0, rows);
      for (let tj = 0; tj < gc; tj++) {
        const j0 = tj * spec.tileCols;
        const n = Math.min(spec.tileCols, spec.cols - j0);
        const index = tileIndex(spec, s, ti, tj);
        yield { index, tile: skip?.(index) ? SKIPPED : cutBlock(band, spec.cols, 0, j0, rows, n), m: rows, n };
      }
    }
  }
}

/** Visit every tile in index order (see {@link tilesOf}). */
export function forEachTile(src: BandSource, spec: FieldSpec, visit: (index: number, tile: FloatArray, m: number, n: number) => void): void {
  for (const { index, tile, m, n } of tilesOf(src, spec)) visit(index, tile, m, n);
}

/** Min and max over finite values that are not the fill value, read band by band. */
export function validRange(src: BandSource, spec: FieldSpec, watch?: { add(values: FloatArray): void }): [number, number] | null {
  const fw = fillWords(spec.fill, spec.dtype);
  const f = fw === null ? NaN : spec.dtype === 'f32' ? Math.fround(spec.fill as number) : (spec.fill as number);
  let lo = Infinity;
  let hi = -Infinity;
  const step = Math.max(1, spec.tileRows);
  const total = (spec.slices ?? 1) * spec.rows;
  // Bands stay within a slice, as the encoder's own reads do.
  for (let r0 = 0, end = 0; r0 < total; r0 = end) {
    end = Math.min(total, r0 + step, (Math.floor(r0 / spec.rows) + 1) * spec.rows);
    const values = src.band(r0, end - r0);
    watch?.add(values);
    for (let i = 0; i < values.length; i++) {
      const v = values[i];
      // Most values lie within the range so far, and one inside changes nothing (a fill value or a zero of
      // either sign too): one test of two compares for them. NaN and the infinities fail it (lo and hi are
      // finite once set). On bench/'s 4096 x 4096 field the pass took 36-58 ms against 66-113 without it
      // (scratch measurement, five passes each, alternated).
      if (v >= lo && v <= hi) continue;
      if (!Number.isFinite(v)) continue;
      if (v === f && Object.is(v, f)) continue;
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
  }
  return lo <= hi ? [lo, hi] : null;
}
