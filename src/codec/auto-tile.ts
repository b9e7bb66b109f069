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
const WHOLE_CELLS = 1 << 20;

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
  else if (Math.min(rows, cols) <= 256) add(rows <= cols ? rows : Math.floor(WHOLE_CELLS / cols), rows <= cols ? Math.floor(WHOLE_CELLS / rows) : cols);
  return out;
}

/** The candidate tile shape that packs a sample of the field into the fewest bytes. */
export function chooseTile(src: BandSource, spec: FieldSpec): [number, number] {
  const rows = Math.min(spec.rows, SAMPLE_SIDE);
  const cols = Math.min(spec.cols, SAMPLE_SIDE);
  const c0 = Math.floor((spec.cols - cols) / 2);
  const band = src.band(0, rows);
  let sample: FloatArray = band;
  if (cols < spec.cols) {
    sample = spec.dtype === 'f32' ? new Float32Array(rows * cols) : new Float64Array(rows * cols);
    for (let i = 0; i < rows; i++) sample.set(band.subarray(i * spec.cols + c0, i * spec.cols + c0 + cols), i * cols);
  }
  const sampleSrc: BandSource = { band: (r0, count) => sample.subarray(r0 * cols, (r0 + count) * cols) };
  let best: [number, number] = [spec.tileRows, spec.tileCols];
  let bestBytes = Infinity;
  for (const [tr, tc] of tileCandidates(spec.rows, spec.cols)) {
    const trial: FieldSpec = { ...spec, rows, cols, tileRows: Math.min(tr, rows), tileCols: Math.min(tc, cols) };
    let bytes = 0;
    encodeField(sampleSrc, trial, (_t, tile) => (bytes += tile.payload.length + TILE_INDEX_BYTES));
    if (bytes < bestBytes) {
      bestBytes = bytes;
      best = [tr, tc];
    }
  }
  return best;
}

/** About what one tile adds to the index (offsets, lengths, CRCs, errors). */
const TILE_INDEX_BYTES = 60;
