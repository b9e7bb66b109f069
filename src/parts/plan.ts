/**
 * A run plan: the field-wide choices of one packing, made once by a first
 * pass over the whole field, so that parts of the field packed apart (on
 * other processes or machines) make exactly the choices a single process
 * makes, and their join is byte-identical to the single pack.
 *
 * The field-wide choices are: the tile shape (when chosen by trial), the
 * value range of the valid values (stored in the header; it resolves rel
 * and psnr bounds), the resolved tolerance, and for rmse and psnr bounds
 * the L2 plan that shares the squared-error budget over the tiles (see
 * src/codec/plan-l2.ts). A plan also records a CRC-32 of every band of the
 * input it was made from, so a part run against other bytes is refused.
 *
 * The plan is JSON (spec/FORMAT.md, "Parts of a run", gives its keys); its
 * SHA-256 over a canonical form of everything but the run name and the hash
 * itself identifies it, and parts carry that hash and the run name.
 */
import { createHash } from 'node:crypto';
import { chooseTile } from '../codec/auto-tile.js';
import { fieldBasis, type BandSource, type FieldChoices, type FieldSpec } from '../codec/field.js';
import { fillWords } from '../codec/mask.js';
import { l2Plan, planL2, type L2PlanData } from '../codec/plan-l2.js';
import { keepsTiles } from '../codec/first-pass.js';
import { isPointwise } from '../codec/bound.js';
import { tileGrid } from '../codec/tiles.js';
import { crc32, crc32Combiner } from '../format/crc32.js';
import { InputCode, InputError } from '../errors.js';
import type { Bound, BoundMode, Dtype, FloatArray } from '../types.js';
import { VERSION_STRING } from '../version.js';
import { readJson } from './json-read.js';

/** The program that makes plans and packs parts, as archives name their writer. */
const WRITER = `rankfield ${VERSION_STRING}`;

/** The version of the plan's JSON form this code writes and reads. */
export const PLAN_VERSION = 1;

/** What a plan says of the field it was made for, and of the choices. */
export interface PlanField {
  /** Field name stored in the archive. */
  name: string;
  dtype: Dtype;
  /** [rows, cols] of the field (for an N-D array in a matrix layout: of the matrix). */
  shape: [number, number];
  /** The array's own shape, its dimension names and layout, when it has more than 2 axes (stored in the header). */
  nd_shape?: number[];
  dims?: string[];
  layout?: string;
  tile: [number, number];
  page: [number, number];
  bound: Bound;
  fill: number | null;
  progressive: boolean;
  /** The resolved absolute tolerance. */
  tolerance: number;
  /** [min, max] of the valid values, or null when there are none. */
  range: [number, number] | null;
}

/** A run plan (see the module comment). */
export interface RunPlan {
  version: number;
  /** The program that made the plan (`rankfield` and its version): parts are packed by the same one, so their payloads are a single pack's. */
  writer: string;
  /** The run's name, shown to users and carried by every part: `--run`, or the field name and the first 12 hex digits of the hash. */
  run: string;
  /** SHA-256 (hex) of the canonical form of `writer`, `source`, `field`, `l2` and `keep`. */
  hash: string;
  source: {
    /** The input's file name, for messages only (not compared). */
    file: string;
    /** Rows of one band (index-page rows of tiles): the unit of `band_crc` and of the split into parts. */
    band_rows: number;
    /** CRC-32 of each band's values as read (native-order bytes of the field's dtype). */
    band_crc: number[];
  };
  field: PlanField;
  /** The L2 plan (rmse, psnr bounds), or null. */
  l2: L2PlanData | null;
  /** Whether the encoder prepares each tile as the L2 first pass does (fields up to first-pass.ts's size for keeping tiles), as a single pack does. */
  keep: boolean;
}

/** The encoder's spec of the planned field. */
export function planSpec(f: PlanField): FieldSpec {
  return { name: f.name, dtype: f.dtype, rows: f.shape[0], cols: f.shape[1], tileRows: f.tile[0], tileCols: f.tile[1], bound: f.bound, fill: f.fill, progressive: f.progressive };
}

/** The field-level choices a plan fixes, for tiles numbered from `t0` (the L2 arrays cut to tiles t0..t1 - 1). */
export function planChoices(plan: RunPlan, t0 = 0, t1 = Infinity): FieldChoices {
  const f = plan.field;
  const fill = fillWords(f.fill, f.dtype);
  const pointwise = isPointwisePlan(f);
  const data = plan.l2 === null ? null : { ...plan.l2, ranks: plan.l2.ranks.subarray(t0, t1), allot: plan.l2.allot.subarray(t0, t1) };
  return { tol: f.tolerance, range: f.range, fill, dtype: f.dtype, progressive: f.progressive, pointwise, plan: pointwise || data === null ? null : l2Plan(data, fill) };
}

/** Rows of one band: a row of index pages, so parts split the payloads and the index pages between them without sharing a page. */
export function bandRows(f: Pick<PlanField, 'tile' | 'page'>): number {
  return f.tile[0] * f.page[0];
}

/** CRC-32 of consecutive rows read from the start of a field, one per band of `rows` rows. */
export class BandCrc {
  private next: number;
  private crc = 0;
  readonly crcs: number[] = [];
  /** `first`: the first row (a band's first); `check`, if given, sees each band's CRC as it completes (bands counted from `first`'s). */
  constructor(
    private readonly band: number,
    private readonly cols: number,
    first = 0,
    private readonly check?: (band: number, crc: number) => void,
  ) {
    this.next = first;
  }
  /** Rows [r0, r0 + values.length / cols); reads that are not the next rows are ignored (the caller reads the field more than once). */
  add(r0: number, values: FloatArray): void {
    if (r0 !== this.next) return;
    const count = values.length / this.cols;
    let i = 0;
    while (i < count) {
      const r = r0 + i;
      const take = Math.min(count - i, this.band - (r % this.band));
      const part = values.subarray(i * this.cols, (i + take) * this.cols);
      this.crc = crc32(new Uint8Array(part.buffer, part.byteOffset, part.byteLength), this.crc);
      i += take;
      if ((r + take) % this.band === 0) this.flush();
    }
    this.next = r0 + count;
  }
  /** End the last band (a partial one at the bottom of the field). */
  finish(): number[] {
    if (this.next % this.band !== 0) this.flush();
    return this.crcs;
  }
  private flush(): void {
    const crc = this.crc >>> 0;
    this.crcs.push(crc);
    this.crc = 0;
    this.check?.(this.crcs.length - 1, crc);
  }
}

/** How a plan is made: the field's spec (tile shape fixed or chosen by trial) and how the first pass runs. */
export interface PlanRequest {
  spec: FieldSpec;
  page: [number, number];
  nd?: { nd_shape: number[]; dims?: string[]; layout?: string };
  /** The input's file name, for messages. */
  file: string;
  /** The run's name; default: the field name and the hash's first 12 hex digits. */
  run?: string;
  /**
   * The L2 first pass (every tile's singular values) and the plan choice,
   * when made elsewhere (on worker threads); by default planL2 here.
   */
  planL2?: (src: BandSource, spec: FieldSpec, c: FieldChoices) => Promise<L2PlanData>;
}

/**
 * Make the plan of a field read from `src`, with the same steps, in the
 * same order, as a single pack makes its choices (ArchiveBuilder: the tile
 * trial; encodeField: the value range, the tolerance, the L2 plan).
 */
export async function makePlan(src: BandSource, req: PlanRequest): Promise<RunPlan> {
  const rows = new BandCrc(1, req.spec.cols);
  // The value range is read once, row by row from the top: the rows' CRCs are taken on the way
  // (the bands', which depend on the tile shape, follow from them once the trial has chosen it).
  const c = fieldBasis({ band: (r0, count) => {
    const v = src.band(r0, count);
    rows.add(r0, v);
    return v;
  } }, req.spec);
  const row_crc = rows.finish();
  // Internal assertion: validRange reads every row once, in order.
  if (row_crc.length !== req.spec.rows) throw new Error(`the range pass read ${row_crc.length} rows, not ${req.spec.rows}`);
  const spec = trialTile(src, req.spec, c);
  const band_crc = bandCrcs(row_crc, spec, req.page);
  let l2: L2PlanData | null = null;
  if (!c.pointwise) l2 = req.planL2 ? await req.planL2(src, spec, c) : planL2(src, spec, c.tol, c.fill).data;
  return finishPlan(req, spec, band_crc, c, l2);
}

/** The spec with its tile shape fixed: chosen by trial on `src` (reading only the sampled tiles' bands) when asked for; 2-D fields only. */
export function trialTile(src: BandSource, given: FieldSpec, basis: FieldChoices): FieldSpec {
  const spec = { ...given };
  if ((spec.slices ?? 1) > 1) throw new InputError(InputCode.Option, `field '${spec.name}' holds ${spec.slices} slices: plans and parts split 2-D fields and matrix layouts only`);
  if (spec.autoTile) [spec.tileRows, spec.tileCols] = chooseTile(src, { ...spec, slices: 1 }, basis).shape;
  spec.autoTile = false;
  return spec;
}

/** The CRC-32s of a field's bands (tile rows x page rows each) from its rows' CRC-32s: each band is its rows' bytes one after another. */
export function bandCrcs(rowCrcs: readonly number[], spec: FieldSpec, page: readonly number[]): number[] {
  const band = spec.tileRows * page[0];
  const combine = crc32Combiner(spec.cols * (spec.dtype === 'f32' ? 4 : 8));
  const out: number[] = [];
  for (let r = 0; r < rowCrcs.length; r++) {
    const b = Math.floor(r / band);
    out[b] = r % band === 0 ? rowCrcs[r] : combine(out[b], rowCrcs[r]);
  }
  return out;
}

/**
 * The plan from its choices: the spec with its tile shape fixed, the
 * bands' CRC-32s, the tolerance and range (`c`), and the L2 plan (null for
 * pointwise bounds, and in the base of a plan made in parts).
 */
export function finishPlan(req: Pick<PlanRequest, 'page' | 'nd' | 'file' | 'run'>, spec: FieldSpec, band_crc: number[], c: Pick<FieldChoices, 'tol' | 'range' | 'pointwise'>, l2: L2PlanData | null): RunPlan {
  const page = req.page;
  const field: PlanField = {
    name: spec.name,
    dtype: spec.dtype,
    shape: [spec.rows, spec.cols],
    ...(req.nd ?? {}),
    tile: [spec.tileRows, spec.tileCols],
    page,
    bound: { mode: spec.bound.mode, value: spec.bound.value },
    fill: spec.fill,
    progressive: spec.progressive === true,
    tolerance: c.tol,
    range: c.range,
  };
  const source = { file: req.file, band_rows: spec.tileRows * page[0], band_crc };
  const keep = !c.pointwise && keepsTiles(spec);
  const writer = WRITER;
  const hash = planHash(writer, source, field, l2, keep);
  return { version: PLAN_VERSION, writer, run: req.run ?? `${spec.name}-${hash.slice(0, 12)}`, hash, source, field, l2, keep };
}

/** Whether a plan's bound is held tile by tile (no L2 plan is made for it). */
export function isPointwisePlan(f: Pick<PlanField, 'bound' | 'tolerance'>): boolean {
  return isPointwise(f.bound.mode) || f.tolerance === 0;
}

/** Numbers whose exact value JSON cannot carry (-0, NaN, infinities) are written as strings. */
export function exact(x: number): number | string {
  if (Object.is(x, -0)) return '-0';
  if (!Number.isFinite(x)) return String(x);
  return x;
}

/** The canonical JSON of what a plan decides (every key in a fixed order), hashed and written. */
function canonical(writer: string, source: RunPlan['source'], f: PlanField, l2: L2PlanData | null, keep: boolean): Record<string, unknown> {
  return {
    writer,
    source: { band_rows: source.band_rows, band_crc: source.band_crc },
    field: {
      name: f.name,
      dtype: f.dtype,
      shape: f.shape,
      nd_shape: f.nd_shape ?? null,
      dims: f.dims ?? null,
      layout: f.layout ?? null,
      tile: f.tile,
      page: f.page,
      bound: [f.bound.mode, exact(f.bound.value)],
      fill: f.fill === null ? null : exact(f.fill),
      progressive: f.progressive,
      tolerance: exact(f.tolerance),
      range: f.range === null ? null : f.range.map(exact),
    },
    l2: l2 === null ? null : { name: l2.name, kind: l2.kind, ranks: Array.from(l2.ranks), c: exact(l2.c), dw: exact(l2.dw), ePrime: exact(l2.ePrime), allot: Array.from(l2.allot, exact), tol: exact(l2.tol) },
    keep,
  };
}

function planHash(writer: string, source: RunPlan['source'], f: PlanField, l2: L2PlanData | null, keep: boolean): string {
  return createHash('sha256').update(JSON.stringify(canonical(writer, source, f, l2, keep))).digest('hex');
}

/**
 * The plan as the JSON text `rankfield plan` writes; with `base`, the base
 * of a plan made in parts (spec/FORMAT.md, 20): the same keys, its L2 plan
 * still to make, under the key `rankfield_plan_base`, so that no part packs
 * from it.
 */
export function planText(p: RunPlan, base = false): string {
  const c = canonical(p.writer, p.source, p.field, p.l2, p.keep);
  const body = { [base ? BASE_KEY : 'rankfield_plan']: p.version, run: p.run, hash: p.hash, file: p.source.file, ...c };
  return `${JSON.stringify(body)}\n`;
}

/** The key that marks the base of a plan made in parts. */
const BASE_KEY = 'rankfield_plan_base';

/**
 * Read a plan written by {@link planText} (with `base`, the base of a plan
 * made in parts); anything else, or a plan changed since, is refused with
 * one line naming `label`.
 */
export function parsePlan(text: string, label: string, base = false): RunPlan {
  const what = base ? "the base of a plan written by 'rankfield plan --merge'" : "a plan written by 'rankfield plan'";
  const bad = (why: string): never => {
    throw new InputError(InputCode.Option, `${label}: not ${what} (${why})`);
  };
  const { root: r, obj, num, int, str, arr, pair } = readJson(text, 'the plan', bad);
  if (!base && r[BASE_KEY] !== undefined) {
    throw new InputError(InputCode.Option, `${label}: this is the base of a plan made in parts, without its L2 plan: run the spectra pass on it ('rankfield plan IN --base ${label} --part K/N'), then merge those pieces into the plan`);
  }
  const key = base ? BASE_KEY : 'rankfield_plan';
  if (r[key] !== PLAN_VERSION) bad(r[key] === undefined ? `no ${key} key` : `version ${JSON.stringify(r[key])}; this program reads version ${PLAN_VERSION}`);
  const s = obj(r.source, 'source');
  const source = { file: typeof r.file === 'string' ? r.file : '', band_rows: int(s.band_rows, 'source.band_rows', 1), band_crc: arr(s.band_crc, 'source.band_crc').map((x, i) => int(x, `source.band_crc[${i}]`)) };
  const f = obj(r.field, 'field');
  const b = arr(f.bound, 'field.bound', 2);
  const mode = str(b[0], 'field.bound[0]');
  if (!['abs', 'rel', 'rmse', 'psnr'].includes(mode)) bad(`bound mode '${mode}'`);
  const dtype = str(f.dtype, 'field.dtype');
  if (dtype !== 'f32' && dtype !== 'f64') bad(`dtype '${dtype}'`);
  const field: PlanField = {
    name: str(f.name, 'field.name'),
    dtype: dtype as Dtype,
    shape: pair(f.shape, 'field.shape'),
    tile: pair(f.tile, 'field.tile'),
    page: pair(f.page, 'field.page'),
    bound: { mode: mode as BoundMode, value: num(b[1], 'field.bound[1]') },
    fill: f.fill === null ? null : num(f.fill, 'field.fill'),
    progressive: f.progressive === true,
    tolerance: num(f.tolerance, 'field.tolerance'),
    range: f.range === null ? null : (arr(f.range, 'field.range', 2).map((x) => num(x, 'field.range')) as [number, number]),
  };
  if (f.nd_shape !== null) field.nd_shape = arr(f.nd_shape, 'field.nd_shape').map((x) => int(x, 'field.nd_shape', 1));
  if (f.dims !== null) field.dims = arr(f.dims, 'field.dims').map((x) => str(x, 'field.dims'));
  if (f.layout !== null) field.layout = str(f.layout, 'field.layout');
  let l2: L2PlanData | null = null;
  if (r.l2 !== null) {
    const l = obj(r.l2, 'l2');
    const kind = str(l.kind, 'l2.kind');
    if (kind !== 'rank' && kind !== 'residual') bad(`l2.kind '${kind}'`);
    l2 = {
      name: str(l.name, 'l2.name'),
      kind: kind as L2PlanData['kind'],
      ranks: Int32Array.from(arr(l.ranks, 'l2.ranks'), (x) => int(x, 'l2.ranks')),
      c: num(l.c, 'l2.c'),
      dw: num(l.dw, 'l2.dw'),
      ePrime: num(l.ePrime, 'l2.ePrime'),
      allot: Float64Array.from(arr(l.allot, 'l2.allot'), (x) => num(x, 'l2.allot')),
      tol: num(l.tol, 'l2.tol'),
    };
  }
  const keep = r.keep === true;
  const writer = str(r.writer, 'writer');
  const hash = planHash(writer, source, field, l2, keep);
  if (r.hash !== hash) {
    throw new InputError(InputCode.Option, `${label}: the plan was changed after 'rankfield plan' wrote it (its content does not match its hash); make it again`);
  }
  // Checks of consistency beyond the hash (a plan is only written by makePlan, but a hand-made one with a valid hash is possible).
  const [gr, gc] = tileGrid(planSpec(field));
  if (source.band_rows !== bandRows(field) || source.band_crc.length !== Math.ceil(field.shape[0] / source.band_rows)) bad('its bands do not match its tile and page shapes');
  if (l2 !== null && ((l2.kind === 'rank' && l2.ranks.length !== gr * gc) || l2.allot.length !== gr * gc)) bad(`its L2 plan does not cover the ${gr * gc} tiles`);
  if (base !== (l2 === null && !isPointwisePlan(field))) bad(base ? 'it has its L2 plan, or needs none' : `its bound ${field.bound.mode} needs an L2 plan and it has none`);
  if (writer !== WRITER) {
    throw new InputError(InputCode.Option, `${label}: the plan was made by ${writer}, this is ${WRITER}; the parts of a run are packed by the program that made its plan (their payloads would differ): make the plan again, or use ${writer}`);
  }
  return { version: PLAN_VERSION, writer, run: str(r.run, 'run'), hash, source, field, l2, keep };
}

/** The rows and tiles of part k of n (1-based): a contiguous run of bands, split as evenly as whole bands allow. */
export interface PartRange {
  k: number;
  n: number;
  /** Bands [b0, b1) of the plan's bands. */
  bands: [number, number];
  /** Field rows [r0, r1). */
  rows: [number, number];
  /** Tiles [t0, t1) in the field's tile order. */
  tiles: [number, number];
}

/**
 * Which rows part k of n packs: with B bands (rows of index pages), part k
 * takes bands floor((k - 1) B / n) .. floor(k B / n) - 1, so every machine
 * computes the same split from the plan alone, and no index page is shared
 * between parts. n must be at most B.
 */
export function partRange(plan: { field: Pick<PlanField, 'shape' | 'tile' | 'page'> }, k: number, n: number): PartRange {
  const f = plan.field;
  const band = bandRows(f);
  const bands = Math.ceil(f.shape[0] / band);
  if (!Number.isSafeInteger(n) || n < 1 || !Number.isSafeInteger(k) || k < 1 || k > n) throw new InputError(InputCode.Option, `part ${k}/${n}: give K/N with 1 <= K <= N`);
  if (n > bands) {
    throw new InputError(InputCode.Option, `part ${k}/${n}: the field has ${bands} band${bands === 1 ? '' : 's'} of ${band} rows (${f.page[0]} tile rows of ${f.tile[0]}, one row of index pages each), so it splits into at most ${bands} part${bands === 1 ? '' : 's'}`);
  }
  const b0 = Math.floor(((k - 1) * bands) / n);
  const b1 = Math.floor((k * bands) / n);
  const gc = Math.ceil(f.shape[1] / f.tile[1]);
  const r0 = b0 * band;
  const r1 = Math.min(f.shape[0], b1 * band);
  return { k, n, bands: [b0, b1], rows: [r0, r1], tiles: [(r0 / f.tile[0]) * gc, Math.ceil(r1 / f.tile[0]) * gc] };
}
