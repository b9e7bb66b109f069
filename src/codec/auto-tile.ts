/**
 * Choosing a tile shape by trial: encode a sample of the field with each
 * candidate shape and keep the one that takes the fewest bytes. Larger tiles
 * capture low-rank structure that spans the field (a time x space matrix is
 * the clearest case); smaller tiles cost less to read through a window.
 */
import type { FloatArray } from '../types.js';
import { encodeField, type BandSource, type FieldSpec } from './field.js';

/** Square candidates, besides the whole sample when it fits in one tile. */
const SQUARE = [64, 128, 256];
/** Rows and columns of the sample the trial runs on (from the top of the field, centred across). */
const SAMPLE_SIDE = 1024;
/** Largest whole-sample tile tried (cells). */
const WHOLE_CELLS = 1 << 18;
/**
 * A field at most this thin (a time x space matrix, a few levels of a
 * long section) is also tried with tiles across its whole short side and
 * about 512 to 4096 along the long one, and sampled along its long side up
 * to {@link THIN_SAMPLE_CELLS}. Each length is the long side split evenly
 * into the whole number of parts nearest to it (6144 gives 512, 1024, 2048
 * and 3072), so that no thin tile is left over at the end, and at most
 * {@link MAX_STRIP} (the format allows tile sides up to 4096 in the writer).
 */
const THIN_SIDE = 256;
const THIN_LENGTHS = [512, 1024, 2048, 4096];
const MAX_STRIP = 4096;
const THIN_SAMPLE_CELLS = 1 << 20;

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
 * bytes per cell. The sample is the top of the field, centred across, at
 * most 1024 x 1024 (of a thin field: its whole short side, and up to 2^20
 * cells along the long one); a candidate smaller than the sample is tried
 * on TRIAL_TILES of its tiles spread over the sample (laid side by side as
 * one small field), so the trial costs a few whole-sample encodings at most.
 */
export function chooseTile(src: BandSource, spec: FieldSpec): [number, number] {
  const thin = Math.min(spec.rows, spec.cols) <= THIN_SIDE;
  const rows = Math.min(spec.rows, thin && spec.rows > spec.cols ? Math.floor(THIN_SAMPLE_CELLS / spec.cols) : SAMPLE_SIDE);
  const cols = Math.min(spec.cols, thin && spec.cols >= spec.rows ? Math.floor(THIN_SAMPLE_CELLS / spec.rows) : SAMPLE_SIDE);
  const c0 = Math.floor((spec.cols - cols) / 2);
  const band = src.band(0, rows);
  const make = (cells: number): FloatArray => (spec.dtype === 'f32' ? new Float32Array(cells) : new Float64Array(cells));
  const sample = make(rows * cols);
  for (let i = 0; i < rows; i++) sample.set(band.subarray(i * spec.cols + c0, i * spec.cols + c0 + cols), i * cols);
  let best: [number, number] = [spec.tileRows, spec.tileCols];
  let bestRate = Infinity;
  for (const [tr, tc] of tileCandidates(spec.rows, spec.cols)) {
    const m = Math.min(tr, rows);
    const n = Math.min(tc, cols);
    const grid: [number, number][] = [];
    for (let i = 0; i + m <= rows; i += m) for (let j = 0; j + n <= cols; j += n) grid.push([i, j]);
    // Every tile, or TRIAL_TILES of them evenly spread, side by side in one row of tiles.
    const picked = grid.length <= TRIAL_TILES ? grid : Array.from({ length: TRIAL_TILES }, (_, k) => grid[Math.floor(((k + 0.5) * grid.length) / TRIAL_TILES)]);
    const width = picked.length * n;
    const mosaic = make(m * width);
    picked.forEach(([i0, j0], k) => {
      for (let i = 0; i < m; i++) mosaic.set(sample.subarray((i0 + i) * cols + j0, (i0 + i) * cols + j0 + n), i * width + k * n);
    });
    const trialSrc: BandSource = { band: (r0, count) => mosaic.subarray(r0 * width, (r0 + count) * width) };
    const trial: FieldSpec = { ...spec, rows: m, cols: width, tileRows: m, tileCols: n, autoTile: false, guardFill: false }; // the field's own pass guards
    let bytes = 0;
    const done = encodeField(trialSrc, trial, (_t, tile) => (bytes += tile.payload.length + TILE_INDEX_BYTES));
    // Bytes per valid cell: candidates sample different tiles, and missing cells cost next to nothing.
    const rate = bytes / Math.max(1, done.valid);
    if (rate < bestRate) {
      bestRate = rate;
      best = [tr, tc];
    }
  }
  return best;
}

/** About what one tile adds to the index (length, CRCs, method, rank, missing count, errors: spec/FORMAT.md, section 7.3). */
const TILE_INDEX_BYTES = 26;
