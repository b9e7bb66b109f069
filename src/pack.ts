/** Writing archives: {@link pack} one field to bytes, or build a many-field archive with {@link ArchiveBuilder}. */
import { checkBound, parseBound } from './codec/bound.js';
import { chooseTile, chooseTileAsync, WHOLE_CELLS, type TileTrial } from './codec/auto-tile.js';
import { encodeField, fieldBasis, memoryBands, type BandSource, type EncodedTile, type FieldChoices, type FieldPrior, type FieldResult, type FieldSpec } from './codec/field.js';
import { encodeFieldParallel, encodeTasks, encodeTilesOn, mosaicWorkOn } from './parallel/encode.js';
import { checkThreads, WorkerPool } from './parallel/pool.js';
import { InputCode, InputError } from './errors.js';
import { ContainerWriter, DEFAULT_PAGE, FLAG_LAYER, FLAG_SLICES, FLAG_SYMBOLS, MemorySink, VERSION, type Sink } from './format/container.js';
import { MAX_TILE_SIDE, tileCount, tileGrid } from './geometry.js';
import { attrsProblem, holdsLoneSurrogate, ndProblem, quoteName, pageGrid, pageTiles, up32, type ArchiveHeader, type Attrs, type FieldHeader, type FieldIndex, type FieldLayerRef } from './format/schema.js';
import { chooseLayer, layerWorthTrying } from './codec/layer-encode.js';
import { usesSymbolCoder } from './codec/payload.js';
import type { Bound, Dtype, FloatArray } from './types.js';
import { VERSION_STRING } from './version.js';

/** Options for one field. */
export interface PackOptions {
  /** The error bound, as `{ mode, value }` or text such as `'rel:1e-3'`. */
  bound: Bound | string;
  /**
   * Tile size: [rows, cols], or one number for square tiles. Default 'auto':
   * 64, 128 and 256 square tiles, 512 on fields of at least 1024 x 1024, the
   * whole field (when it holds at most 2^18 cells) and, on thin fields,
   * strips across them are each tried on tiles spread over the field, and
   * the one that packs smallest is kept. Smaller tiles make window reads
   * cheaper; set a size to fix it.
   */
  tile?: number | [number, number] | 'auto';
  /**
   * A fill value marking missing cells (restored bit for bit, excluded from
   * the bound and the value range).
   *
   * Fill-value guard: unless `fill` is `null` or `fillGuard` is false, a
   * value that looks like an undeclared fill value is refused with an
   * {@link InputError} of code `fill` naming the value and how many cells
   * hold it: any value of magnitude 1e30 or more, or a single value at an
   * end of the range held by at least 0.1% of the valid cells and farther
   * from the others than 10 times their spread. As data such a value would
   * set the field's range, and a `rel` or `psnr` bound resolved against it
   * would allow errors far larger than the real values.
   *
   * - left out (undefined): no fill value; the guard is on.
   * - a number: cells holding it (by bit pattern, in the dtype) are missing;
   *   the guard is on for the other values.
   * - `null`: no fill value, and every value is data: the guard is off.
   */
  fill?: number | null;
  /** Set false to turn the fill-value guard off whatever `fill` is (see {@link fill}). Default true. */
  fillGuard?: boolean;
  /** Field name; default 'field'. */
  name?: string;
  /** Element type; default from the array (Float32Array: f32, else f64). */
  dtype?: Dtype;
  /** Free-form attributes of the field. */
  attrs?: Attrs;
  /**
   * Lay each tile's factors out in groups of ranks 1, 1, 2, 4, ... (instead of
   * one group), each with its recorded errors, so a progressive reader can stop
   * after the first ranks. Costs about 10-30% more bytes where tiles carry
   * several ranks (bench fields, psnr:40 and psnr:60). Default false.
   */
  progressive?: boolean;
  /**
   * Slices of `shape` stacked in the field (default 1): the values are then
   * slices x rows x cols in C order (for bands: rows of the stacked
   * (slices x rows) x cols matrix). Archives holding a field of more than
   * one slice carry required flag bit 0, which older readers refuse.
   */
  slices?: number;
  /** The original N-D shape (product slices x rows x cols), restored by whole reads. */
  ndShape?: readonly number[];
  /** Dimension names, one per entry of ndShape. */
  dims?: readonly string[];
  /** How ndShape maps to slices x rows x cols: 'slices' (default for 3 or more dims) or 'matrix:A'. */
  layout?: string;
  /**
   * Tiles per index page: [tile rows, tile cols], or one number for square
   * pages. Default 8 x 8. A window read fetches the pages its tiles are on,
   * so smaller pages cost less per window and more in the index directory.
   */
  indexPage?: number | [number, number];
  /**
   * Called each time a tile's payload has been written, with the tiles
   * written so far and the field's tile count (for progress displays). It
   * must not throw; it has no effect on the archive.
   */
  onProgress?: (done: number, total: number) => void;
  /**
   * A field layer: a truncated SVD of the whole field whose two factors are
   * stored as f64 fields of their own, in pieces aligned with the tile rows
   * and tile columns (so a window still reads only the pieces it touches),
   * with each tile's own rank and residual coded on top. It pays where a
   * field is of low rank as a whole but its tiles are kept small for window
   * reads. A rank (an integer from 1 to the smaller of rows x slices and
   * cols, at most {@link MAX_LAYER_RANK}); 'auto': ranks 1, 2, 4 and 8 and no
   * layer estimated on a sample of tiles packed for real, the smallest kept,
   * a layer only when it estimates 10% smaller than none (not tried on
   * fields of fewer than 4 tiles; it costs pack time: 1.6x to 1.9x on
   * bench/'s 4096 x 4096 field); 'off' (default): none.
   * Archives with a layer carry required flag bit 1, which older readers
   * refuse. Not available to packs made in parts (`plan`).
   */
  layer?: 'auto' | 'off' | number;
}

/** Options of one field packed on worker threads ({@link packAsync}, {@link ArchiveBuilder.addAsync}). */
export interface ParallelPackOptions extends PackOptions {
  /**
   * Threads encoding tiles, the calling thread among them (default: the
   * core count, os.availableParallelism()): threads - 1 workers are started.
   * The archive is byte-identical for every count; 1 encodes in the calling
   * thread alone, as {@link pack} does, and so does a field of at most 2^18
   * cells with the tile trial (`tile` 'auto') when no `pool` is given:
   * starting workers costs it more than they save.
   */
  threads?: number;
  /**
   * A pool of worker threads to encode on, kept by the caller across calls
   * (its workers stay started and warm); `threads` is then the pool's. The
   * pool is not closed here.
   */
  pool?: WorkerPool;
}

/** Options of {@link ArchiveBuilder}. */
export interface BuilderOptions {
  /**
   * Fields of more than one slice will be added: set required flag bit 0
   * in the prologue at once. Needed only for sinks without `patch`.
   */
  slices?: boolean;
  /**
   * A field will be added with a layer (`layer` other than 'off'): set
   * required flag bit 1 in the prologue at once, even if 'auto' then keeps
   * no layer. Needed only for sinks without `patch`.
   */
  layer?: boolean;
}

export { MAX_TILE_SIDE };

/** What a field's `layer` option asks for, checked. */
type LayerWant = 'off' | 'auto' | number;

/** Largest rank of a field layer accepted by pack (readers accept up to 1024 by default). */
export const MAX_LAYER_RANK = 64;

/** Largest side of an index page, in tiles. */
export const MAX_PAGE_SIDE = 4096;

/** Largest tile area accepted (cells); readers refuse more by default. */
export const MAX_TILE_CELLS = 1 << 20;

/** Refuse options that are not an object (they hold at least the bound). */
function checkOptions<T extends PackOptions>(o: T): T {
  if (typeof o !== 'object' || o === null || Array.isArray(o)) {
    throw new InputError(InputCode.Option, `pack options must be an object holding at least the error bound, e.g. { bound: 'abs:0.01' }; got ${o === null ? 'null' : Array.isArray(o) ? 'an array' : typeof o}`);
  }
  return o;
}

function options(values: FloatArray | number[], shape: readonly number[], o: PackOptions, withValues = true): { spec: FieldSpec; data: FloatArray; page: [number, number]; layer: 'off' | 'auto' | number } {
  if (!Array.isArray(shape) || shape.length !== 2 || !shape.every((d) => Number.isInteger(d) && d >= 1)) {
    throw new InputError(InputCode.Shape, `shape must be [rows, cols] of positive integers, got ${JSON.stringify(shape)}`);
  }
  if (withValues && !(Array.isArray(values) || values instanceof Float32Array || values instanceof Float64Array)) {
    throw new InputError(InputCode.Dtype, `values must be a Float32Array, a Float64Array or an array of numbers, got ${values === null ? 'null' : typeof values === 'object' ? (values as object).constructor?.name ?? 'an object' : typeof values}`);
  }
  const [rows, cols] = shape;
  const slices = o.slices ?? 1;
  const ndShape = o.ndShape === undefined ? undefined : Array.from(o.ndShape);
  const dims = o.dims === undefined ? undefined : Array.from(o.dims);
  const nd = ndProblem(rows, cols, slices === 1 && ndShape === undefined ? undefined : slices, ndShape, dims, o.layout);
  if (nd) throw new InputError(InputCode.Shape, `field '${o.name ?? 'field'}': ${nd}`);
  if (withValues && values.length !== slices * rows * cols) {
    const what = slices === 1 ? `${rows}x${cols}` : `${slices} slices of ${rows}x${cols}`;
    throw new InputError(InputCode.Shape, `shape ${what} needs ${slices * rows * cols} values, got ${values.length}`);
  }
  const dtype: Dtype = o.dtype ?? (values instanceof Float32Array ? 'f32' : 'f64');
  if (dtype !== 'f32' && dtype !== 'f64') throw new InputError(InputCode.Dtype, `dtype must be f32 or f64, got ${String(dtype)}`);
  const want = dtype === 'f32' ? Float32Array : Float64Array;
  const data = !withValues || values instanceof want ? (values as FloatArray) : want.from(values);
  const tile = o.tile ?? 'auto';
  const auto = tile === 'auto';
  if (!auto && typeof tile !== 'number' && !(Array.isArray(tile) && tile.length === 2)) {
    throw new InputError(InputCode.Option, `tile must be a number, [rows, cols] or 'auto', got ${JSON.stringify(tile)}`);
  }
  const [tr, tc] = auto ? [64, 64] : typeof tile === 'number' ? [tile, tile] : tile;
  for (const t of [tr, tc]) {
    if (!Number.isInteger(t) || t < 1 || t > MAX_TILE_SIDE) {
      throw new InputError(InputCode.Option, `tile sides must be integers in 1..${MAX_TILE_SIDE}, got ${JSON.stringify(tile)}`);
    }
  }
  if (tr * tc > 1 << 20) throw new InputError(InputCode.Option, `tile ${tr}x${tc} holds more than ${1 << 20} cells`);
  const ip = o.indexPage ?? [DEFAULT_PAGE[0], DEFAULT_PAGE[1]];
  const page = typeof ip === 'number' ? [ip, ip] : ip;
  if (!Array.isArray(page) || page.length !== 2 || !page.every((x) => Number.isInteger(x) && x >= 1 && x <= MAX_PAGE_SIDE)) {
    throw new InputError(InputCode.Option, `indexPage must be a number or [rows, cols] of integers in 1..${MAX_PAGE_SIDE}, got ${JSON.stringify(ip)}`);
  }
  const bound = typeof o.bound === 'string' ? parseBound(o.bound) : checkBound(o.bound ?? ({} as Bound));
  const fill = o.fill ?? null;
  if (fill !== null && typeof fill !== 'number') throw new InputError(InputCode.Option, `fill must be a number, got ${String(fill)}`);
  if (o.fillGuard !== undefined && typeof o.fillGuard !== 'boolean') throw new InputError(InputCode.Option, `fillGuard must be true or false, got ${String(o.fillGuard)}`);
  const guardFill = o.fill !== null && o.fillGuard !== false;
  const name = o.name ?? 'field';
  if (typeof name !== 'string' || name.length === 0 || name.length > 1024) throw new InputError(InputCode.Option, 'field name must be a non-empty string');
  const problem = o.attrs === undefined ? null : attrsProblem(o.attrs);
  if (problem) throw new InputError(InputCode.Option, `field '${name}': ${problem}`);
  if (holdsLoneSurrogate([name, dims, o.attrs])) throw new InputError(InputCode.Option, `field ${quoteName(name)}: its name, dimension names or attributes hold a lone UTF-16 surrogate, which UTF-8 cannot store`);
  const layer = layerOption(o.layer, slices * rows, cols, name);
  return { spec: { name, dtype, rows, cols, tileRows: tr, tileCols: tc, bound, fill, autoTile: auto, slices, progressive: o.progressive === true, guardFill }, data, page: [page[0], page[1]], layer };
}

/** The `layer` option checked: 'off', 'auto', or a rank from 1 to the smaller of the stacked field's sides (and {@link MAX_LAYER_RANK}). */
function layerOption(v: PackOptions['layer'], rows: number, cols: number, name: string): 'off' | 'auto' | number {
  if (v === undefined || v === 'off' || v === 'auto') return v ?? 'off';
  const most = Math.min(rows, cols, MAX_LAYER_RANK);
  if (typeof v !== 'number' || !Number.isInteger(v) || v < 1 || v > most) {
    throw new InputError(InputCode.Option, `field '${name}': layer must be 'auto', 'off' or a rank, an integer in 1..${most} for a ${rows}x${cols} field, got ${typeof v === 'number' ? String(v) : JSON.stringify(v) ?? typeof v}`);
  }
  return v;
}

/**
 * The encoder's spec and the index page shape of a field of `shape` and
 * `dtype` packed with options `o`, checked as {@link ArchiveBuilder.addBands}
 * checks them (a tile shape 'auto' is still to be chosen: `spec.autoTile`).
 */
export function fieldSpecOf(shape: readonly number[], dtype: Dtype, o: PackOptions): { spec: FieldSpec; page: [number, number] } {
  const { spec, page } = options(new Float32Array(0), shape, { ...checkOptions(o), dtype }, false);
  return { spec, page };
}

/** A caller's band callback, with every band it returns checked against the field. */
function checkedBands(band: (r0: number, count: number) => FloatArray, spec: FieldSpec): BandSource {
  return {
    band: (r0, count) => {
      // Internal assertion: the rows are the encoder's own request, always within the
      // field, so no input reaches this; it guards the caller's callback against a bug here.
      if (r0 < 0 || r0 + count > (spec.slices ?? 1) * spec.rows) throw new Error(`band rows ${r0}..${r0 + count} asked outside the field`);
      const b = band(r0, count);
      if (b.length !== count * spec.cols || !(spec.dtype === 'f32' ? b instanceof Float32Array : b instanceof Float64Array)) {
        throw new InputError(InputCode.Shape, `band of rows ${r0}..${r0 + count} holds ${b.length} ${b.constructor.name} values, not ${count * spec.cols} ${spec.dtype}`);
      }
      return b;
    },
  };
}

/** Builds an archive field by field into a sink. */
export class ArchiveBuilder {
  private readonly writer: ContainerWriter;
  private readonly fields: FieldHeader[] = [];
  private readonly indexes: FieldIndex[] = [];
  private finished = false;
  private readonly pages: [number, number][] = [];

  /** Whether the sink can patch the prologue (set a required flag after payloads are written). */
  private readonly patchable: boolean;

  constructor(sink: Sink, private attrs: Attrs = {}, options: BuilderOptions = {}) {
    const problem = attrsProblem(attrs);
    if (problem) throw new InputError(InputCode.Option, `archive ${problem}`);
    if (holdsLoneSurrogate(attrs)) throw new InputError(InputCode.Option, 'archive attributes hold a lone UTF-16 surrogate, which UTF-8 cannot store');
    this.patchable = typeof sink.patch === 'function';
    // Flag bit 2 (symbols) is set when the first tile coded with the symbol coder is written; a sink that
    // cannot patch the prologue gets it from the start (a writer may set it without such a tile).
    this.writer = new ContainerWriter(sink, (options.slices === true ? FLAG_SLICES : 0) | (options.layer === true ? FLAG_LAYER : 0) | (this.patchable ? 0 : FLAG_SYMBOLS));
  }

  /** Encode and append one field held in memory (row-major). */
  add(values: FloatArray | number[], shape: readonly number[], o: PackOptions): FieldHeader {
    this.refuseAfterFinish(checkOptions(o).name);
    const { spec, data, page, layer } = options(values, shape, o);
    return this.encode(memoryBands(data, spec.cols), spec, o, page, layer);
  }

  /** {@link add} with tiles encoded on worker threads (`o.threads`); the same bytes for every thread count. */
  async addAsync(values: FloatArray | number[], shape: readonly number[], o: ParallelPackOptions): Promise<FieldHeader> {
    this.refuseAfterFinish(checkOptions(o).name);
    const { spec, data, page, layer } = options(values, shape, o);
    return this.encodeAsync(memoryBands(data, spec.cols), spec, o, page, layer);
  }

  /**
   * Encode and append one field read band by band (rows [r0, r0 + count) at
   * a time), so its whole values never need to be in memory. `band` may be
   * called more than once for the same rows (range pass, L2 planning). It
   * may return a view of one buffer that it fills again at every call: the
   * encoder is done with a band before it asks for the next.
   */
  addBands(band: (r0: number, count: number) => FloatArray, shape: readonly number[], dtype: Dtype, o: PackOptions): FieldHeader {
    this.refuseAfterFinish(checkOptions(o).name);
    const { spec, page, layer } = options(new Float32Array(0), shape, { ...o, dtype }, false);
    return this.encode(checkedBands(band, spec), spec, o, page, layer);
  }

  /**
   * {@link addBands} with tiles encoded on worker threads (`o.threads`):
   * `band` is called in this thread, while the workers encode the bands
   * read before; the same bytes for every thread count.
   */
  async addBandsAsync(band: (r0: number, count: number) => FloatArray, shape: readonly number[], dtype: Dtype, o: ParallelPackOptions): Promise<FieldHeader> {
    this.refuseAfterFinish(checkOptions(o).name);
    const { spec, page, layer } = options(new Float32Array(0), shape, { ...o, dtype }, false);
    return this.encodeAsync(checkedBands(band, spec), spec, o, page, layer);
  }

  /** Refuse a field after finish(): appended after the tail, it would leave an archive that does not open. */
  private refuseAfterFinish(name: string | undefined): void {
    if (this.finished) throw new InputError(InputCode.Option, `field '${name ?? 'field'}' cannot be added: finish() has already written the archive's header, index and tail`);
  }

  private encode(src: BandSource, spec: FieldSpec, o: PackOptions, page: [number, number], layer: LayerWant): FieldHeader {
    this.checkField(spec);
    let prior: FieldPrior | undefined;
    if (spec.autoTile) {
      // The range pass comes first, so that the trial encodes its tiles with the field's own tolerance.
      const basis = fieldBasis(src, spec);
      // The trial samples the first slice.
      prior = this.settleTile(spec, basis, chooseTile(src, { ...spec, slices: 1 }, basis));
    }
    const laid = this.layerFor(src, spec, page, layer, prior);
    const w = this.start(spec, page, o.onProgress);
    return this.end(spec, o, page, w.ix, encodeField(src, spec, w.emit, laid.prior), laid.ref);
  }

  private async encodeAsync(src: BandSource, spec: FieldSpec, o: ParallelPackOptions, page: [number, number], layer: LayerWant): Promise<FieldHeader> {
    const threads = o.pool?.threads ?? checkThreads(o.threads);
    // With the tile trial, the number of tiles is known only after it; the trial's tiles are encoded on the pool too.
    const workers = spec.autoTile ? (o.pool === undefined && fieldCells(spec) <= WHOLE_CELLS ? 1 : threads) : Math.min(threads, tileCount(spec));
    if (workers === 1) return this.encode(src, spec, o, page, layer);
    // The calling thread encodes tiles too, as one of the threads, and takes back tiles a worker has not started when it has none left.
    const pool = o.pool ?? new WorkerPool(workers, { local: (kind, body) => encodeTasks[kind as keyof typeof encodeTasks](body as never).result, preload: 'encode', steal: true });
    try {
      this.checkField(spec);
      let prior: FieldPrior | undefined;
      if (spec.autoTile) {
        const basis = fieldBasis(src, spec);
        prior = this.settleTile(spec, basis, await chooseTileAsync(src, { ...spec, slices: 1 }, basis, (tiles) => encodeTilesOn(pool, basis, tiles), mosaicWorkOn(pool)));
      }
      // The layer is chosen and computed in this thread (the same for every thread count); the tiles' terms travel with them.
      const laid = this.layerFor(src, spec, page, layer, prior);
      const w = this.start(spec, page, o.onProgress);
      return this.end(spec, o, page, w.ix, await encodeFieldParallel(src, spec, w.emit, pool, laid.prior), laid.ref);
    } finally {
      if (pool !== o.pool) await pool.close();
    }
  }

  /**
   * The field layer, when one is asked for and (with 'auto') pays: chosen
   * on a sample (layer-encode.ts), its two factor fields written to the
   * archive before the field, and `spec.layer` set to the factors as a
   * reader decodes them. What the encoding pass takes over from a tile
   * trial made without a layer is dropped then (its basis kept).
   */
  private layerFor(src: BandSource, spec: FieldSpec, page: [number, number], want: LayerWant, prior: FieldPrior | undefined): { prior: FieldPrior | undefined; ref?: FieldLayerRef } {
    if (want === 'off') return { prior };
    const basis = prior?.basis ?? fieldBasis(src, spec);
    const basePrior: FieldPrior = { basis, done: new Map() };
    if (want === 'auto' && !layerWorthTrying(spec, basis.tol)) return { prior: prior ?? basePrior };
    // Refused before any work when the flag cannot be set; set only once a layer is kept ('auto' may keep none).
    if ((this.writer.flags & FLAG_LAYER) === 0 && !this.patchable) {
      throw new InputError(InputCode.Option, `field '${spec.name}' asks for a layer: create the ArchiveBuilder with { layer: true } (this sink cannot patch the prologue)`);
    }
    const { coded } = chooseLayer(src, spec, basis, want, this.factorNames(spec.name));
    if (coded === null) return { prior: prior ?? basePrior };
    this.writer.requireFlags(FLAG_LAYER);
    const left = this.fields.length;
    for (const [f, rows] of [[coded.left, page[0]], [coded.right, page[1]]] as const) {
      // A factor's tiles are one column of tiles: pages of the field's page rows (left) or page columns (right).
      const w = this.start(f.spec, [rows, 1]);
      f.tiles.forEach((tile, t) => w.emit(t, tile));
      this.end(f.spec, { bound: f.spec.bound }, [rows, 1], w.ix, f.result);
    }
    spec.layer = coded.layer;
    return { prior: basePrior, ref: { rank: coded.layer.rank, left, right: left + 1 } };
  }

  /** Names of a field's two factor fields: its name and '.layer-rows' / '.layer-cols', numbered on when taken. */
  private factorNames(name: string): [string, string] {
    const taken = (x: string) => x === name || this.fields.some((f) => f.name === x);
    for (let k = 1; ; k++) {
      const tail = k === 1 ? '' : `-${k}`;
      const pair: [string, string] = [`${name}.layer-rows${tail}`, `${name}.layer-cols${tail}`];
      if (pair[0].length <= 1024 && !taken(pair[0]) && !taken(pair[1])) return pair;
      // Internal assertion: a name of 1024 characters leaves no room; such a field takes no layer name.
      if (pair[0].length > 1024) throw new InputError(InputCode.Option, `field '${name.slice(0, 40)}...': its name is too long to name the layer's factor fields after it (1024 characters at most)`);
    }
  }

  /** Fix the tile shape the trial chose; what the encoding pass takes over from the trial. */
  private settleTile(spec: FieldSpec, basis: FieldChoices, trial: TileTrial): FieldPrior {
    [spec.tileRows, spec.tileCols] = trial.shape;
    // The trial's plan is the field's only when the first slice is the whole field.
    const plan = (spec.slices ?? 1) === 1 ? trial.plan : undefined;
    return { basis, done: trial.done, ...(plan ? { plan } : {}), ...(trial.spectra ? { spectra: trial.spectra } : {}), ...(trial.svds ? { svds: trial.svds } : {}) };
  }

  /** Refuse a field whose name is taken, or whose slices need a flag the sink cannot set any more. */
  private checkField(spec: FieldSpec): void {
    if (this.fields.some((f) => f.name === spec.name)) throw new InputError(InputCode.Option, `field '${spec.name}' is already in the archive`);
    const slices = spec.slices ?? 1;
    if (slices > 1 && !this.writer.requireFlags(FLAG_SLICES)) {
      throw new InputError(InputCode.Option, `field '${spec.name}' has ${slices} slices: create the ArchiveBuilder with { slices: true } (this sink cannot patch the prologue)`);
    }
  }

  /**
   * Append one field whose tiles are already coded (parts of a run, and
   * their join): `produce` hands every tile to `emit` in tile order, with
   * its payload and recorded figures, and returns the field's result; the
   * writer lays the payloads out page by page and builds the index from
   * them, exactly as for a field it encodes itself. `spec` must have its
   * tile shape fixed (no autoTile).
   */
  async addCoded(spec: FieldSpec, o: Omit<PackOptions, 'bound'>, page: [number, number], produce: (emit: (t: number, tile: EncodedTile) => void) => FieldResult | Promise<FieldResult>): Promise<FieldHeader> {
    this.refuseAfterFinish(spec.name);
    // Internal assertion: callers (parts and join) fix the tile shape from a plan or a part header.
    if (spec.autoTile) throw new Error('addCoded needs a fixed tile shape');
    this.checkField(spec);
    const w = this.start(spec, page, o.onProgress);
    return this.end(spec, { ...o, bound: spec.bound }, page, w.ix, await produce(w.emit));
  }

  /** Replace the archive's attributes (written by finish()), e.g. with figures known only once the fields are coded. */
  setAttrs(attrs: Attrs): void {
    const problem = attrsProblem(attrs);
    if (problem) throw new InputError(InputCode.Option, `archive ${problem}`);
    if (holdsLoneSurrogate(attrs)) throw new InputError(InputCode.Option, 'archive attributes hold a lone UTF-16 surrogate, which UTF-8 cannot store');
    this.attrs = attrs;
  }

  /** The index a field's tiles fill, and the emit that writes their payloads page by page. */
  private start(spec: FieldSpec, page: [number, number], onProgress?: (done: number, total: number) => void): { ix: FieldIndex; emit: (t: number, tile: EncodedTile) => void } {
    // Payloads are written page by page (spec/FORMAT.md, section 3): the tiles of one band of
    // page rows are held (encoded) until the band is complete, then written page after page.
    const n = tileCount(spec);
    const [gr, gc] = tileGrid(spec);
    const [pr, pc] = pageGrid(spec, page);
    const column = () => new Array<number>(n).fill(0);
    const ix: FieldIndex = { offset: column(), length: column(), crc: column(), method: column(), rank: column(), valid: column(), max_err: column(), rmse: column(), value_crc: column(), summary: { valid: 0, max_err: 0, rmse: 0 } };
    // Prefixes are recorded for progressive layouts only, where a read can stop after the first factor groups.
    if (spec.progressive) ix.prefix = new Array<number[]>(n);
    const held = new Map<number, EncodedTile>();
    let written = 0;
    const emit = (t: number, tile: EncodedTile) => {
      held.set(t, tile);
      const s = Math.floor(t / (gr * gc));
      const ti = Math.floor((t - s * gr * gc) / gc);
      const tj = (t - s * gr * gc) % gc;
      if (tj !== gc - 1 || (ti !== gr - 1 && (ti + 1) % page[0] !== 0)) return;
      const pi = Math.floor(ti / page[0]);
      for (let pj = 0; pj < pc; pj++) {
        for (const u of pageTiles(spec, page, s * pr * pc + pi * pc + pj)) {
          const e = held.get(u);
          if (e === undefined) throw new Error(`tile ${u} was not encoded before the end of its band of pages`);
          held.delete(u);
          // Internal assertion: the flag is set from the start when the sink cannot patch it in.
          if (usesSymbolCoder(e.payload) && !this.writer.requireFlags(FLAG_SYMBOLS)) throw new Error('required flag bit 2 could not be set');
          const ref = this.writer.addPayload(e.payload);
          ix.offset[u] = ref.offset;
          ix.length[u] = ref.length;
          ix.crc[u] = ref.crc;
          ix.method[u] = e.stats.method;
          ix.rank[u] = e.stats.rank;
          ix.valid[u] = e.stats.valid;
          // The measured errors: the index page rounds them up as it records them (to shares of the
          // tolerance or to binary32, spec/FORMAT.md 7.3, 7.5), once, so that a joined archive whose tiles
          // carry their parts' recorded figures records the same ones.
          ix.max_err[u] = e.stats.maxErr;
          ix.rmse[u] = e.stats.rmse;
          ix.value_crc[u] = e.stats.valueCrc;
          if (ix.prefix) ix.prefix[u] = e.stats.prefix.map((x, q) => (q % 4 >= 2 ? up32(x) : x));
          onProgress?.(++written, n);
        }
      }
      if (t === n - 1 && held.size > 0) throw new Error(`${held.size} tiles were encoded but not written`);
    };
    return { ix, emit };
  }

  /** The field's header and index, once every tile is written. */
  private end(spec: FieldSpec, o: PackOptions, page: [number, number], ix: FieldIndex, result: FieldResult, layer?: FieldLayerRef): FieldHeader {
    const slices = spec.slices ?? 1;
    // The largest measured tile max_err; the container writes the summary's from the figures the pages record (spec/FORMAT.md 7.4).
    ix.summary = { valid: result.valid, max_err: ix.max_err.reduce((a, b) => Math.max(a, b), 0), rmse: result.rmse };
    const header: FieldHeader = {
      name: spec.name,
      dtype: spec.dtype,
      shape: [spec.rows, spec.cols],
      tile: [spec.tileRows, spec.tileCols],
      bound: { mode: spec.bound.mode, value: spec.bound.value, tolerance: result.tolerance, range: result.range },
      fill: spec.fill,
      attrs: o.attrs ?? {},
    };
    // Optional keys are written only when they say something, so 2-D archives keep their bytes.
    if (slices > 1) header.slices = slices;
    if (o.ndShape !== undefined) header.nd_shape = Array.from(o.ndShape);
    if (o.dims !== undefined) header.dims = Array.from(o.dims);
    if (o.ndShape !== undefined && (o.layout !== undefined || o.ndShape.length > 2)) header.layout = o.layout ?? 'slices';
    if (layer) header.layer = layer;
    this.fields.push(header);
    this.indexes.push(ix);
    this.pages.push(page);
    return header;
  }

  /** Write header, index and tail. The builder takes no field after this, and finishes once. */
  finish(): void {
    if (this.finished) throw new InputError(InputCode.Option, 'finish() was already called: the archive is complete');
    this.finished = true;
    const header: ArchiveHeader = { format: 'rankfield', version: VERSION, writer: `rankfield ${VERSION_STRING}`, attrs: this.attrs, fields: this.fields };
    this.writer.finish(header, { fields: this.indexes }, this.pages);
  }
}

/** Compress one 2-D field (row-major) into archive bytes. */
export function pack(values: FloatArray | number[], shape: readonly number[], o: PackOptions): Uint8Array {
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink);
  b.add(values, shape, o);
  b.finish();
  return sink.bytes();
}

/**
 * Cells of a field, over all its slices. With the tile trial and no pool of
 * the caller's, a field of at most WHOLE_CELLS (one the trial may keep whole,
 * as one tile) is packed in the calling thread: starting workers, whose code
 * is then cold, cost more than the second thread saved. Measured with
 * packAsync at rel:1e-3, threads 2 against 1 (medians of 5 wall times, quick
 * bench fields): 0.20x on volcano (61 x 87), 0.44x on annual-precip
 * (168 x 360), 0.34x to 0.46x on the 256 x 256 fields.
 */
function fieldCells(spec: FieldSpec): number {
  return (spec.slices ?? 1) * spec.rows * spec.cols;
}

/**
 * {@link pack} with tiles encoded on worker threads (`o.threads`, default the
 * core count): byte-identical to pack's archive for every thread count.
 */
export async function packAsync(values: FloatArray | number[], shape: readonly number[], o: ParallelPackOptions): Promise<Uint8Array> {
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink);
  await b.addAsync(values, shape, o);
  b.finish();
  return sink.bytes();
}
