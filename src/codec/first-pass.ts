/**
 * The first pass of planning for L2 bounds (./plan-l2.ts): every tile's
 * singular values (its spectrum, squared, in units of tol^2), taken from
 * the tile prepared as the encoder prepares it, and the prepared tiles
 * themselves while the field is small enough to keep them (or, of a
 * larger field, the SVDs it computed of the tiles the plan's costing
 * samples), for the plan choice and the encoding pass.
 */
import { forEachTile, termFor, tileGrid, type BandSource, type FieldSpec } from './tiles.js';
import type { FloatArray } from '../types.js';
import { gramSingularValues } from '../linalg/spectrum.js';
import { truncatedSvd } from '../linalg/truncated.js';
import { keepSvd, prepareTile, type PreparedTile } from './prepare.js';
import type { Svd } from '../linalg/svd.js';
import { Spectra } from './spectra.js';

/** Prepared tiles are kept between passes for fields up to this many cells. */
const KEEP_CELLS = 4 << 20;
/**
 * Of a larger field, the SVDs the first pass computed of the tiles the
 * costing samples are handed to it, up to this many bytes of vectors
 * (32 MiB: 48 rank-16 SVDs of 4096 x 2730 tiles), so that it does not
 * compute them again (see {@link TileSvds}).
 */
const HANDOFF_BYTES = 32 << 20;

/**
 * SVDs computed of tiles, by tile index, then by rung (as PreparedTile.svds
 * holds them): handed from one pass to a later one that prepares the same
 * tiles again. A rung's SVD is a function of the tile's centred values
 * alone (see ensureSvd), so a tile prepared again from the same values, or
 * one without missing cells prepared with another tolerance (its centred
 * values do not depend on it, see {@link tileSpectrum}), takes them as
 * they are.
 */
export type TileSvds = ReadonlyMap<number, ReadonlyMap<number, Svd>>;

/** Take the SVDs handed over for a tile prepared again (the rungs it has not computed). */
export function adoptSvds(t: PreparedTile, svds: ReadonlyMap<number, Svd> | undefined): void {
  if (svds !== undefined) for (const [k, s] of svds) if (!t.svds.has(k)) t.svds.set(k, s);
}

/** Bytes of an SVD's vectors and values. */
function svdBytes(s: Svd): number {
  return s.u.byteLength + s.v.byteLength + s.s.byteLength;
}

/** What the first pass learns of one tile (and the tile itself, prepared, while a field is small enough to keep it). */
export interface FirstPassTile {
  /** Squared singular values in units of tol^2, so nothing overflows; descending, as the SVD gives them. */
  sv2: Float64Array;
  /** Rows, columns and valid cells. */
  dims: [number, number, number];
  tile?: PreparedTile;
}

/** Whether the first pass keeps its prepared tiles for the second (fields up to KEEP_CELLS). */
export function keepsTiles(spec: Pick<FieldSpec, 'rows' | 'cols' | 'slices'>): boolean {
  return (spec.slices ?? 1) * spec.rows * spec.cols <= KEEP_CELLS;
}

/**
 * The first pass over one tile: prepare it and take its whole spectrum.
 * `known`: the singular values the tile trial took of these same values
 * (see {@link tileSpectrum}); `seen` is handed the singular values taken;
 * `term`: the field layer's term for the tile (see termFor in tiles.ts), or null.
 */
export function firstPassTile(
  tile: FloatArray,
  m: number,
  n: number,
  spec: Pick<FieldSpec, 'dtype' | 'progressive'>,
  fill: Uint32Array | null,
  tol: number,
  keep: boolean,
  known?: Float64Array,
  seen?: (s: Float64Array) => void,
  term: Float64Array | null = null,
  svds?: ReadonlyMap<number, Svd>,
): FirstPassTile {
  const t = prepareTile(tile, m, n, spec.dtype, fill, tol, spec.progressive ? 'doubling' : 'one', term);
  adoptSvds(t, svds);
  const s = tileSpectrum(t, tol, known);
  seen?.(s);
  return { sv2: s.map((v) => (v / tol) * (v / tol)), dims: [m, n, t.valid], ...(keep ? { tile: t } : {}) };
}

/**
 * A prepared tile's singular values (none when it has no valid cell or
 * overflowed), as the L2 plans need them: every one of them, or the
 * leading ones and a lumped tail ({@link leadingSpectrum}) where the tail
 * is too small to matter to any plan. Cutting the field-wide smallest
 * values needs their squares only to the budget's accuracy, so the Gram
 * matrix's eigenvalues serve for the whole spectrum
 * (src/linalg/spectrum.ts); the second pass computes singular vectors only
 * up to the rank it codes. `known`, when given, are the values computed
 * before from the same tile values, prepared with another tolerance: they
 * serve as they are for a tile without missing cells, whose prepared
 * (centred) values do not depend on the tolerance (only the filling of
 * missing cells does). The tile trial's tolerance is at most the field's
 * (its sample's range is within the field's), so a tail it lumped is
 * within this tolerance's limit too.
 */
export function tileSpectrum(t: PreparedTile, tol: number, known?: Float64Array): Float64Array {
  if (!(t.valid > 0 && t.finite)) return new Float64Array(0);
  if (known !== undefined && t.classes.special === 0 && known.length === Math.min(t.m, t.n)) return known;
  return leadingSpectrum(t, tol) ?? gramSingularValues(t.centred, t.m, t.n);
}

/** Tiles whose shorter side is below this take the whole spectrum (the Gram matrix is cheap there). */
const LEADING_MIN_SIDE = 256;
/** Leading values tried, in turn, before the whole spectrum is taken. */
const LEADING_COUNTS = [16, 48];
/**
 * Where the rank-16 spectrum leaves a tail over the limit that more than
 * this share of 32 values as large as its 16th would be needed to carry,
 * the rank-48 try is not made (it would fail: the spectrum is flat).
 * Measured (issue 10) on bench/'s quick and full fields at psnr:40, 60, 80
 * and rmse:1e-2, every tile whose rank-16 try failed: the rank-48 try
 * succeeded on the 6 tiles (smooth-front) where that share was 0.010 to
 * 0.033, and failed on the 26 (turbulence among them) where it was 0.45 to
 * 0.56 (a rank-48 randomized SVD thrown away: 45 ms on a 256 x 256 tile).
 */
const FLAT_REACH = 0.25;
/**
 * A lumped tail may hold at most this share of the tile's own part of the
 * budget (valid x tol^2): a thousandth, so that every tile's tail together
 * is a thousandth of the field's budget, far inside the smallest truncation
 * share (common practice, no source, for the share).
 */
const LUMP_SHARE = 1e-3;

/**
 * The tile's spectrum as its k leading singular values (the randomized
 * range finder of src/linalg/truncated.ts) and the rest as equal values
 * whose squares add up to the energy left, frob2 - sum of the k squares
 * (the Frobenius norm squared is the sum of all squared singular values):
 * for the first k in {@link LEADING_COUNTS} whose tail energy is within
 * {@link LUMP_SHARE} of the tile's part of the budget; null when none is, or
 * when the tile is too small to gain. A cut from the smallest values up
 * takes such a tail whole before any leading value (each lumped value is
 * at most the last leading one, as the true tail's values are), and the
 * plans see its total to within the rounding of frob2; the order in which
 * the field's tails are cut, and so the exact rank where a cut stops
 * inside a tail, may differ from the whole spectrum's, which is why the
 * tail must be far below any share of the budget.
 */
export function leadingSpectrum(t: PreparedTile, tol: number): Float64Array | null {
  const full = Math.min(t.m, t.n);
  if (full < LEADING_MIN_SIDE || !(tol > 0)) return null;
  const limit = LUMP_SHARE * t.valid * tol * tol;
  for (const [at, k] of LEADING_COUNTS.entries()) {
    if (k + 8 >= full) break;
    const r = truncatedSvd(t.centred, t.m, t.n, k);
    // The same SVD the encoder computes for its candidates of rank up to k, when k is one of its rungs.
    keepSvd(t, k, r);
    let lead = 0;
    for (let j = 0; j < k; j++) lead += r.s[j] * r.s[j];
    const tail = Math.max(0, r.frob2 - lead);
    if (!(tail <= limit)) {
      // The next count's values would have to carry what is left over the limit: not tried where even
      // FLAT_REACH times as many values as it adds, each as large as this count's last, fall short.
      const more = (LEADING_COUNTS[at + 1] ?? k) - k;
      if (tail - limit > FLAT_REACH * more * r.s[k - 1] * r.s[k - 1]) return null;
      continue;
    }
    const out = new Float64Array(full);
    out.set(r.s.subarray(0, k));
    out.fill(Math.min(r.s[k - 1], Math.sqrt(tail / (full - k))), k);
    return out;
  }
  return null;
}

/**
 * The smallest values of a tile's spectrum (squares in units of tol^2,
 * descending) that an Eckart-Young cut could reach in a field of `cells`
 * cells: the longest tail whose sum stays within the largest truncation
 * share of a budget of `cells` (the budget is the valid cells, never more).
 * A cut takes a tile's values from its smallest up and only while the
 * field's cut total stays within share x budget, so a value whose tail sum
 * passes that limit is never cut, and leaving it out (with the values above
 * it) changes no plan. The limit is widened by a millionth against rounding
 * in the sums.
 */
export function cuttable(sv2: Float64Array, cells: number): Float64Array {
  const limit = Math.max(...TRUNCATION_SHARES) * cells * (1 + 1e-6);
  let sum = 0;
  let j = sv2.length;
  while (j > 0 && sum + Math.max(0, sv2[j - 1]) <= limit) sum += Math.max(0, sv2[--j]);
  return sv2.subarray(j);
}

/**
 * The first pass over every tile of a field, in this thread, into a
 * {@link Spectra} store (and the prepared tiles, when kept). `known`: the
 * singular values the tile trial took, by tile index; `seen` is handed each
 * tile's singular values; `svds`: the SVDs the tile trial computed, by tile
 * index (see {@link TileSvds}); `keep`: whether the prepared tiles are kept
 * (by default, for fields up to KEEP_CELLS cells; see {@link keepsTiles});
 * `hold`: of a field whose tiles are not kept, whether the tiles the
 * costing samples are held, prepared, for the plan choice in this thread
 * (see {@link FirstPass.sampled}).
 */
export function firstPass(
  src: BandSource,
  spec: FieldSpec,
  tol: number,
  fill: Uint32Array | null,
  known?: ReadonlyMap<number, Float64Array>,
  seen?: (index: number, s: Float64Array) => void,
  { svds, keep = keepsTiles(spec), hold = false }: { svds?: TileSvds; keep?: boolean; hold?: boolean } = {},
): FirstPass {
  const spectra = new Spectra(tileCount(spec));
  const kept: PreparedTile[] = [];
  const handoff = new SvdHandoff(spectra.tiles, keep, hold);
  forEachTile(src, spec, (index, tile, m, n) => {
    const f = firstPassTile(tile, m, n, spec, fill, tol, keep || handoff.wants(index), known?.get(index), seen && ((s) => seen(index, s)), termFor(spec, index, m, n), svds?.get(index));
    spectra.add(f);
    if (keep) kept.push(f.tile!);
    else handoff.add(index, f.tile);
  });
  return { spectra, kept, svds: handoff.handed, ...(hold && !keep ? { sampled: handoff.held } : {}) };
}

/**
 * Of a field whose tiles are not kept, the SVDs the first pass computed of
 * the tiles the costing samples, handed to it (up to HANDOFF_BYTES), so
 * that it does not compute them again (see {@link TileSvds}).
 */
export class SvdHandoff {
  readonly handed = new Map<number, Map<number, Svd>>();
  /** With `hold`, the sampled tiles themselves, prepared (see {@link FirstPass.sampled}). */
  readonly held = new Map<number, PreparedTile>();
  private readonly sampled: Set<number>;
  private bytes = 0;
  /**
   * @param tiles the field's tile count; @param keep whether the first pass keeps its tiles (then nothing is
   * handed: the tiles are); @param hold whether the sampled tiles are held whole as well.
   */
  constructor(
    tiles: number,
    keep: boolean,
    private readonly hold = false,
  ) {
    this.sampled = keep ? new Set() : new Set(sampleTiles(tiles));
  }
  /** Whether tile `index`'s first pass should return the prepared tile (with its SVDs) for the handoff. */
  wants(index: number): boolean {
    return this.sampled.has(index);
  }
  /** The tile's SVDs, while the handoff holds at most HANDOFF_BYTES. */
  add(index: number, t: PreparedTile | undefined): void {
    if (t !== undefined && this.hold && this.sampled.has(index)) this.held.set(index, t);
    if (t === undefined || t.svds.size === 0 || !this.sampled.has(index)) return;
    let b = 0;
    for (const s of t.svds.values()) b += svdBytes(s);
    if (this.bytes + b <= HANDOFF_BYTES) {
      this.handed.set(index, t.svds);
      this.bytes += b;
    }
  }
}

/**
 * What the first pass hands to the plan choice: every tile's spectrum, the
 * prepared tiles when the field is small enough to keep them, and
 * otherwise the SVDs it computed of the tiles the costing samples.
 */
export interface FirstPass {
  spectra: Spectra;
  kept: PreparedTile[];
  svds?: TileSvds;
  /**
   * Of a field whose tiles are not kept, the tiles the costing samples as
   * the first pass prepared them, by tile index, when it was asked to hold
   * them (a pass in the plan choice's own thread, see {@link planL2}): the
   * costing takes them rather than preparing them again, and the encoding
   * pass takes each from the plan ({@link L2Plan.kept}). The costing holds
   * every sampled tile at once either way; a tile prepared again from the
   * same values with the same tolerance is the same (and with the same
   * SVDs, see {@link TileSvds}).
   */
  sampled?: ReadonlyMap<number, PreparedTile>;
}

/** Shares of the budget given to rank truncation in the Eckart-Young plans. */
export const TRUNCATION_SHARES = [0.3, 0.5, 0.8];
/** Tiles costed per candidate plan. */
const SAMPLE_TILES = 48;

/** The tiles candidate plans are costed on: SAMPLE_TILES spread evenly over the tile order (every tile of a smaller field). */
export function sampleTiles(count: number): number[] {
  const k = Math.min(count, SAMPLE_TILES);
  return Array.from({ length: k }, (_, i) => Math.floor(((i + 0.5) * count) / k));
}

/** Tiles of a field, over all its slices. */
export function tileCount(spec: FieldSpec): number {
  const [gr, gc] = tileGrid(spec);
  return (spec.slices ?? 1) * gr * gc;
}
