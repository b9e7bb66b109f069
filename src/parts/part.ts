/**
 * Packing under a run plan: the whole field, or one part of it (a band of
 * index-page rows, see partRange), with the plan's choices instead of a
 * first pass of its own. A part reads only its band of the input, checks
 * that band against the CRC-32s the plan recorded, and is written as an
 * archive of that band whose attributes say which run, plan and part it is
 * and hold what its join needs (spec/FORMAT.md, "Parts of a run").
 */
import { encodeTile, FieldSummary, tileToEncode, type BandSource, type EncodedTile, type FieldResult, type FieldSpec } from '../codec/field.js';
import { firstPassTile } from '../codec/first-pass.js';
import { tilesOf } from '../codec/tiles.js';
import { InputCode, InputError } from '../errors.js';
import type { Sink } from '../format/container.js';
import type { Attrs } from '../format/schema.js';
import { ArchiveBuilder } from '../pack.js';
import { DEFAULT_LIMITS } from '../format/schema.js';
import type { ErrorTally } from '../codec/tally.js';
import { encodeWithChoices } from '../parallel/encode.js';
import type { WorkerPool } from '../parallel/pool.js';
import { BandCrc, partRange, planChoices, planSpec, type PartRange, type RunPlan } from './plan.js';

/** Archive attributes of a part (spec/FORMAT.md, "Parts of a run"). */
export const PART_KEYS = {
  /** The run's name (string). */
  run: 'rankfield:run',
  /** The plan's SHA-256, hex (string). */
  plan: 'rankfield:plan',
  /** [K, N]: this is part K of N. */
  part: 'rankfield:part',
  /** [r0, r1, rows]: the part holds rows r0..r1 - 1 of the field's rows. */
  rows: 'rankfield:part_rows',
  /** The whole field's N-D shape, dimension names and layout, when it has them. */
  ndShape: 'rankfield:part_nd_shape',
  dims: 'rankfield:part_dims',
  layout: 'rankfield:part_layout',
  /**
   * Two numbers per tile of the part, in tile order: of its error tally's
   * state (count, max, scale, ssq), max and ssq; the count is the tile's
   * valid cells (in the index) and the scale is max when max > 0, else 0.
   */
  tally: 'rankfield:part_tally',
} as const;

/** Options of {@link packPlanned}. */
export interface PlannedOptions {
  /** Pack part k of n ([k, n], 1-based); default: the whole field, as an ordinary archive. */
  part?: [number, number];
  /** Called after each tile's payload is written, with tiles done and the tiles to do. */
  onProgress?: (done: number, total: number) => void;
  /** Where the input is named in messages. */
  input?: string;
  /** Worker threads to encode on (the payloads are the same without); not closed here. */
  pool?: WorkerPool;
  /** The header limit the part's readers (join) apply (default: the readers' default, 16 MiB); see {@link maxPartTiles}. */
  maxHeaderBytes?: number;
}

/** Header bytes a part spends per tile on its error tally: two MessagePack float64s at most. */
export const TALLY_BYTES = 18;
/** Header bytes kept for everything else in a part's header (the field, the bound, the other part attributes). */
export const HEADER_ROOM = 64 << 10;

/**
 * Most tiles one part may hold: its per-tile error tallies sit in its
 * header, which readers refuse beyond `maxHeaderBytes` (16 MiB by default:
 * 928,426 tiles, 3.8 G cells at 64 x 64 tiles).
 */
export function maxPartTiles(maxHeaderBytes: number = DEFAULT_LIMITS.maxHeaderBytes): number {
  return Math.max(0, Math.floor((maxHeaderBytes - HEADER_ROOM) / TALLY_BYTES));
}

/** Refuse part k of n when it holds more tiles than {@link maxPartTiles}, saying how many parts would do. */
export function checkPartTiles(plan: RunPlan, range: PartRange, maxHeaderBytes?: number): void {
  const most = maxPartTiles(maxHeaderBytes);
  const tiles = range.tiles[1] - range.tiles[0];
  if (tiles <= most) return;
  const bands = partRange(plan, 1, 1).bands[1];
  const perBand = tiles / (range.bands[1] - range.bands[0]);
  const bandsPerPart = Math.floor(most / perBand);
  const limit = `a part records ${TALLY_BYTES} bytes of error tally per tile in its header, which readers limit to ${maxHeaderBytes ?? DEFAULT_LIMITS.maxHeaderBytes} bytes, so a part holds at most ${most} tiles`;
  const fix = bandsPerPart >= 1 ? `split the field into at least ${Math.ceil(bands / bandsPerPart)} parts` : `one band holds ${perBand} tiles: make the plan with larger tiles`;
  throw new InputError(InputCode.Option, `part ${range.k}/${range.n} holds ${tiles} tiles; ${limit}: ${fix}`);
}

/** What a part records of a tile's error tally: max and ssq (see PART_KEYS.tally). */
function tallyOf(t: ErrorTally, valid: number): [number, number] {
  const [count, max, scale, ssq] = t.state();
  // Internal assertion: a tile's tally counts its valid cells, and its scale is its largest error.
  if (count !== valid || (max === max && scale !== (max > 0 ? max : 0))) throw new Error(`a tile's error tally (${t.state().join(', ')}) is not one of its ${valid} valid cells`);
  return [max, ssq];
}

/**
 * Encode tiles t0.. of the field from a source of the rows of their band
 * (row 0 of `src` is field row `r0`), as a single pack encodes them, and
 * hand each to `emit` with its band-relative number.
 */
async function encodeBand(src: BandSource, plan: RunPlan, range: PartRange, emit: (t: number, tile: EncodedTile) => void, tallies: number[], pool?: WorkerPool): Promise<FieldResult> {
  const full = planSpec(plan.field);
  const spec: FieldSpec = { ...full, rows: range.rows[1] - range.rows[0] };
  const c = planChoices(plan, range.tiles[0], range.tiles[1]);
  if (pool && pool.threads > 1) {
    return encodeWithChoices(src, spec, c, pool, (index, o) => {
      tallies.push(...tallyOf(o.tally, o.valid));
      emit(index, { payload: o.payload, stats: o.stats });
    }, plan.keep);
  }
  const summary = new FieldSummary(c);
  for (const { index, tile, m, n } of tilesOf(src, spec)) {
    // A single pack of a field small enough keeps each tile as its L2 first pass prepared it and
    // encodes that; a part prepares it the same way, so the payloads are the same.
    const t = plan.keep ? firstPassTile(tile, m, n, full, c.fill, c.tol, true).tile! : tileToEncode(c, index, tile, m, n);
    const o = encodeTile(c, t, index);
    summary.add(o);
    tallies.push(...tallyOf(o.tally, o.valid));
    emit(index, { payload: o.payload, stats: o.stats });
  }
  return summary.result();
}

/**
 * Pack a field (or part of it) from `src` (the whole field's rows; a part
 * reads only its own) under `plan`, into `sink`. Every band read is checked
 * against the plan's CRC-32 of it. Returns the rows packed.
 */
export async function packPlanned(sink: Sink, src: BandSource, plan: RunPlan, o: PlannedOptions = {}): Promise<PartRange> {
  const f = plan.field;
  const [k, n] = o.part ?? [1, 1];
  const range = partRange(plan, k, n);
  if (o.part !== undefined) checkPartTiles(plan, range, o.maxHeaderBytes);
  const [r0, r1] = range.rows;
  const input = o.input ?? plan.source.file;
  const { band: bandSrc, finish } = partBands(src, plan, range, input);
  const spec: FieldSpec = { ...planSpec(f), rows: r1 - r0 };
  const whole = o.part === undefined;
  const builder = new ArchiveBuilder(sink);
  const tallies: number[] = [];
  const attrs = {};
  const opts = { attrs, onProgress: o.onProgress, ...(whole ? { ndShape: f.nd_shape, dims: f.dims, layout: f.layout } : {}) };
  await builder.addCoded(spec, opts, f.page, (emit) => encodeBand(bandSrc, plan, range, emit, tallies, o.pool));
  finish();
  if (!whole) {
    const a: Attrs = { [PART_KEYS.run]: plan.run, [PART_KEYS.plan]: plan.hash, [PART_KEYS.part]: [k, n], [PART_KEYS.rows]: [r0, r1, f.shape[0]] };
    if (f.nd_shape) a[PART_KEYS.ndShape] = f.nd_shape;
    if (f.dims) a[PART_KEYS.dims] = f.dims;
    if (f.layout) a[PART_KEYS.layout] = f.layout;
    a[PART_KEYS.tally] = tallies;
    builder.setAttrs(a);
  }
  builder.finish();
  return range;
}

/**
 * The rows of part `range` of `plan` from `src` (the whole field's rows),
 * renumbered from the part's first row, each band checked against the
 * plan's CRC-32 of it once it has been read whole; `finish` checks the last
 * band, a partial one at the bottom of the field.
 */
export function partBands(src: BandSource, plan: RunPlan, range: PartRange, input: string): { band: BandSource; finish: () => void } {
  const f = plan.field;
  const r0 = range.rows[0];
  const crc = new BandCrc(plan.source.band_rows, f.shape[1], r0, (b, value) => {
    const want = plan.source.band_crc[range.bands[0] + b];
    if (value !== want) {
      const a = (range.bands[0] + b) * plan.source.band_rows;
      throw new InputError(InputCode.File, `${input}: rows ${a}..${Math.min(f.shape[0], a + plan.source.band_rows) - 1} differ from those plan '${plan.run}' was made from (CRC-32 ${hex(value)}, the plan has ${hex(want)}); run the plan again on this input, or give the input it was made from`);
    }
  });
  const band: BandSource = {
    band: (r, count) => {
      const v = src.band(r0 + r, count);
      crc.add(r0 + r, v);
      return v;
    },
  };
  return { band, finish: () => void crc.finish() };
}

function hex(x: number): string {
  return `0x${x.toString(16).padStart(8, '0')}`;
}
