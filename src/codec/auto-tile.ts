/**
 * Choosing a tile shape by trial: encode a sample of the field with each
 * candidate shape and keep the one that takes the fewest bytes. Larger tiles
 * capture low-rank structure that spans the field (a time x space matrix is
 * the clearest case); smaller tiles cost less to read through a window.
 */
import type { FloatArray } from '../types.js';
import { copyBlock } from '../geometry.js';
import { encodeField, type BandSource, type FieldSpec } from './field.js';

/** Square candidates, besides the whole sample when it fits in one tile. */
const SQUARE = [64, 128, 256];
/**
 * A larger square, tried on fields whose both sides reach
 * {@link LARGE_SIDE} (so that the trial's tiles are a small share of the
 * field). On smooth fields at loose
 * bounds a tile's fixed cost (its index entry and payload head, about 40
 * bytes) is a large share of a 256 x 256 tile's few hundred bytes.
 */
const LARGE_SQUARE = 512;
/** Both sides at least this for {@link LARGE_SQUARE} to be tried. */
const LARGE_SIDE = 1024;
/** Largest whole-field tile tried (cells). */
const WHOLE_CELLS = 1 << 18;
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
 * slices), laid side by side as one small field; a field with fewer whole
 * tiles than that is tried on all of them (a candidate as large as the
 * field, on the whole field). The tiles are read one band of tile rows at a
 * time, so the trial holds a few tiles, never the field.
 *
 * Spreading the tiles matters: on bench/'s large field the top 1024 rows
 * favoured 256 x 256 tiles while 512 x 512 packed the whole field 23%
 * smaller (measured at rel:1e-3).
 */
export function chooseTile(src: BandSource, spec: FieldSpec): [number, number] {
  const make = (cells: number): FloatArray => (spec.dtype === 'f32' ? new Float32Array(cells) : new Float64Array(cells));
  let best: [number, number] = [spec.tileRows, spec.tileCols];
  let bestRate = Infinity;
  for (const [m, n] of tileCandidates(spec.rows, spec.cols)) {
    const gr = Math.floor(spec.rows / m);
    const gc = Math.floor(spec.cols / n);
    const whole = gr * gc;
    // Every whole tile, or TRIAL_TILES of them evenly spread in row-major order (so over the tile rows too).
    const picked = whole <= TRIAL_TILES ? Array.from({ length: whole }, (_, k) => k) : Array.from({ length: TRIAL_TILES }, (_, k) => Math.floor(((k + 0.5) * whole) / TRIAL_TILES));
    const width = picked.length * n;
    const mosaic = make(m * width);
    let k = 0;
    while (k < picked.length) {
      const ti = Math.floor(picked[k] / gc);
      const band = src.band(ti * m, m);
      for (; k < picked.length && Math.floor(picked[k] / gc) === ti; k++) {
        const j0 = (picked[k] % gc) * n;
        copyBlock(band, spec.cols, 0, j0, m, n, mosaic, width, 0, k * n);
      }
    }
    const trialSrc: BandSource = { band: (r0, count) => mosaic.subarray(r0 * width, (r0 + count) * width) };
    const trial: FieldSpec = { ...spec, rows: m, cols: width, tileRows: m, tileCols: n, autoTile: false, guardFill: false }; // the field's own pass guards
    let bytes = 0;
    const done = encodeField(trialSrc, trial, (_t, tile) => (bytes += tile.payload.length + TILE_INDEX_BYTES));
    // Bytes per valid cell: candidates sample different tiles, and missing cells cost next to nothing.
    const rate = bytes / Math.max(1, done.valid);
    if (rate < bestRate) {
      bestRate = rate;
      best = [m, n];
    }
  }
  return best;
}

/**
 * About what one tile adds to the index (spec/FORMAT.md, section 7.3): a
 * length varint (2), two CRCs (8), kind and missing count (2), two binary32
 * errors (8); measured 19.3 to 21.6 bytes a tile with 64 x 64 tiles on the
 * bench fields at rel:1e-3.
 */
const TILE_INDEX_BYTES = 20;
