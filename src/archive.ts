/**
 * Reading archives: {@link open} a byte source, then read fields or check
 * them. Only the payloads a call needs are fetched from the source.
 */
import { Cell, classify, fillWords } from './codec/mask.js';
import { checkBound, isPointwise, parseBound, resolveBound } from './codec/bound.js';
import { fieldStep, Method, payloadHead, prefixLengths } from './codec/payload.js';
import { ErrorTally } from './codec/tally.js';
import { DecodeScratch, decodeTile } from './codec/tile-decode.js';
import { FormatCode, FormatError, InputCode, InputError } from './errors.js';
import { FLAG_SYMBOLS, joinPages, readContainer, readPages, tilePage, type Container } from './format/container.js';
import { crc32 } from './format/crc32.js';
import { DEFAULT_LIMITS, type ArchiveDirectory, type ArchiveHeader, type ArchiveIndex, type FieldDirectory, type FieldHeader, type FieldIndex, type Limits, type PageIndex, checkReadCells, pageCount, quoteName, up32 } from './format/schema.js';
import { copyBlock, cutTile, ndShape, tileCount, tileOrigin, tileShape, windowTiles } from './geometry.js';
import { HttpSource } from './io/http-source.js';
import { MemorySource, readRanges, type ByteRange, type ByteSource, type CoalesceOptions } from './io/source.js';
import { LayerRows } from './layer-rows.js';
import type { Bound, Dtype, FloatArray } from './types.js';

/** A decoded field, or a window of one. */
export interface FieldValues {
  name: string;
  dtype: Dtype;
  /**
   * Shape of `values`: [rows, cols] of the window, or [slices, rows, cols]
   * for a field of slices (layout 'slices' or more than one slice); a whole
   * read of a field with an nd_shape returns that shape.
   */
  shape: number[];
  /** Row-major values of the window. */
  values: FloatArray;
  /** Where the window lies in the field: half-open row and column ranges. */
  /** `slices` is present only for fields of slices (see {@link hasSlices}). */
  window: { slices?: [number, number]; rows: [number, number]; cols: [number, number] };
  /**
   * What the returned values are known to satisfy, from the figures recorded
   * at encode time for the tiles (or tile prefixes) they came from: the
   * largest error of any value, and the RMSE over those tiles' valid values.
   */
  achieved: { maxErr: number; rmse: number };
  /** Tiles served from a prefix (factors only) rather than their whole payload. */
  prefixTiles: number;
}

/**
 * Options of {@link Archive.read}. Ranges are half-open, `[start, end)`,
 * in field rows and columns; an omitted range means all of them.
 */
export interface ReadOptions {
  /** Slices [s0, s1) of the window (fields of slices only; default all). */
  slices?: readonly [number, number];
  /** Rows [r0, r1) of the window. */
  rows?: readonly [number, number];
  /** Columns [c0, c1) of the window. */
  cols?: readonly [number, number];
  /**
   * Also check each decoded tile against the CRC-32 of the values verified
   * at encode time (costs one CRC pass over the decoded tiles). Default false:
   * payload CRCs are always checked.
   */
  verify?: boolean;
  /**
   * A looser bound than the archive holds (progressive reading): each tile
   * is read only as far as a prefix of its payload whose recorded error meets
   * this bound (resolved against the field's stored value range), else whole.
   * `achieved` in the result states what the returned values satisfy.
   */
  bound?: Bound | string;
}

/** Keys {@link ReadOptions} may hold; any other is refused, so a misspelt option is not silently ignored. */
const READ_KEYS = ['slices', 'rows', 'cols', 'verify', 'bound'];

/** What a read takes of one tile. */
interface TileChoice {
  length: number;
  prefix: boolean;
  crc: number;
  maxErr: number;
  rmse: number;
}

/** Payload bytes fetched per batch of a read: bounds the memory a read holds besides its output. */
const BATCH_BYTES = 16 << 20;

/**
 * An original read a band of rows at a time, for {@link Archive.check}:
 * rows [r0, r0 + count) of the field's stacked matrix (slices x rows, each
 * of the field's columns; the C-order values of its N-D shape), row-major.
 */
export interface BandOriginal {
  band(r0: number, count: number): FloatArray;
}

/** One failed check. */
export interface CheckFailure {
  field: string;
  /** Tile index, or -1 for the field as a whole. */
  tile: number;
  what: string;
}

/** Result of {@link Archive.check}. */
export interface CheckReport {
  ok: boolean;
  fields: {
    name: string;
    tiles: number;
    /** Bound mode and resolved tolerance. */
    mode: string;
    tolerance: number;
    /** Recorded at encode time (from the index). */
    recorded: { maxErr: number; rmse: number };
    /** Measured against the original, when one was given. */
    measured?: { maxErr: number; rmse: number; specialMismatches: number };
  }[];
  failures: CheckFailure[];
}

/** Options of {@link open}. */
export interface OpenOptions {
  /** Reader limits; defaults to {@link DEFAULT_LIMITS}. */
  limits?: Partial<Limits>;
  /** How payload reads are merged (gap and waste limits, reads in flight). */
  coalesce?: CoalesceOptions;
}

/** One tile's entry in its index page. */
export interface TileEntry {
  offset: number;
  length: number;
  crc: number;
  method: number;
  rank: number;
  valid: number;
  max_err: number;
  rmse: number;
  value_crc: number;
  /** Recorded prefixes as quads (length, crc, max_err, rmse); empty when none. */
  prefix: number[];
}

/** What decoding any tile of a field takes from its header, worked out once (see {@link FieldPages.decoding}). */
interface FieldDecoding {
  /** The fill value as words of the dtype, or null. */
  fill: Uint32Array | null;
  /** The field's residual step (fieldStep of its tolerance). */
  step: number;
  /** "LABEL field 'NAME'", for messages. */
  where: string;
}

/** Index pages of one field, fetched on demand and kept. */
class FieldPages {
  readonly loaded = new Map<number, PageIndex>();
  readonly pending = new Map<number, Promise<void>>();
  private decode: FieldDecoding | null = null;
  constructor(
    readonly h: FieldHeader,
    readonly d: FieldDirectory,
  ) {}
  /** The field's decoding constants, made on first use (each costs allocations, which a read of one small tile would pay again every time). */
  decoding(label: string): FieldDecoding {
    if (this.decode === null) this.decode = { fill: fillWords(this.h.fill, this.h.dtype), step: fieldStep(this.h.bound.tolerance), where: `${label} field ${quoteName(this.h.name)}` };
    return this.decode;
  }
  /** Whether every page of `pages` is held. */
  holds(pages: readonly number[]): boolean {
    for (const p of pages) if (!this.loaded.has(p)) return false;
    return true;
  }
  /** The entry of tile t; its page must have been loaded. */
  entry(c: Container, position: number, t: number): TileEntry {
    const { p, k } = tilePage(c, position, t);
    const pg = this.loaded.get(p);
    if (pg === undefined) throw new Error(`index page ${p} of field ${quoteName(this.h.name)} was not loaded before tile ${t} was used`);
    return { offset: pg.offset[k], length: pg.length[k], crc: pg.crc[k], method: pg.method[k], rank: pg.rank[k], valid: pg.valid[k], max_err: pg.max_err[k], rmse: pg.rmse[k], value_crc: pg.value_crc[k], prefix: pg.prefix?.[k] ?? [] };
  }
}

/** An opened archive. */
export class Archive {
  readonly header: ArchiveHeader;
  /** The index directory: per field, its index pages, payload runs and summary. */
  readonly directory: ArchiveDirectory;
  /** Size of the archive in bytes. */
  readonly size: number;
  /** The reader limits this archive was checked against. */
  readonly limits: Limits;
  private readonly pages: FieldPages[];
  /** The same, by field header. */
  private readonly pageOf: Map<FieldHeader, FieldPages>;
  private whole: ArchiveIndex | null = null;
  /** Working buffers of tile decoding, shared by this archive's reads (decoding a tile is synchronous). */
  private readonly scratch = new DecodeScratch();
  /** Required flag bit 2: residuals coded with the symbol coder are allowed (and refused without it). */
  private readonly symbols: boolean;

  constructor(
    private readonly source: ByteSource,
    private readonly container: Container,
    private readonly coalesce: CoalesceOptions = {},
  ) {
    this.header = container.header;
    this.directory = container.directory;
    this.size = container.size;
    this.limits = container.limits;
    this.symbols = (container.flags & FLAG_SYMBOLS) !== 0;
    this.pages = this.header.fields.map((h, i) => new FieldPages(h, this.directory.fields[i]));
    this.pageOf = new Map(this.pages.map((fp) => [fp.h, fp]));
  }

  /** Names of the fields, in archive order (the factor fields of field layers among them). */
  get names(): string[] {
    return this.header.fields.map((f) => f.name);
  }

  /**
   * Names of the fields a user reads, in archive order: every field but
   * those holding a factor of another field's layer (spec/FORMAT.md 6.2.2),
   * which are read as part of that field (and may still be read by name).
   */
  get mainNames(): string[] {
    return this.header.fields.filter((f) => f.factorOf === undefined).map((f) => f.name);
  }

  /**
   * The whole index, once {@link loadIndex} has fetched it. Reads do not
   * need it: they fetch only the index pages of the tiles they touch.
   */
  get index(): ArchiveIndex {
    if (this.whole === null) throw new InputError(InputCode.Option, `the whole index of ${this.source.label} is not loaded: call await archive.loadIndex() first (reads fetch only the index pages they need)`);
    return this.whole;
  }

  /** Fetch every index page of every field (checking each, and each field's summary) and return the whole index. */
  async loadIndex(): Promise<ArchiveIndex> {
    if (this.whole !== null) return this.whole;
    const fields: FieldIndex[] = [];
    for (let i = 0; i < this.header.fields.length; i++) fields.push(await this.fieldIndexAt(i));
    this.whole = { fields };
    return this.whole;
  }

  /** The whole index of one field (the first when `name` is omitted), from all its pages. */
  async fieldIndex(name?: string): Promise<FieldIndex> {
    return this.fieldIndexAt(this.field(name).position);
  }

  private async fieldIndexAt(position: number): Promise<FieldIndex> {
    const fp = this.pages[position];
    const all = Array.from({ length: pageCount(fp.h, fp.d.page) }, (_, p) => p);
    await this.loadPages(position, all);
    return joinPages(this.container, position, all.map((p) => fp.loaded.get(p)!), this.source.label);
  }

  /**
   * Fetch the index pages of field `position` not yet held (one merged
   * fetch for all of them); pages being fetched by another call are awaited.
   */
  private async loadPages(position: number, pages: readonly number[]): Promise<void> {
    const fp = this.pages[position];
    const missing = [...new Set(pages)].filter((p) => !fp.loaded.has(p) && !fp.pending.has(p));
    if (missing.length > 0) {
      const job = readPages(this.source, this.container, position, missing, this.coalesce).then((got) => missing.forEach((p, i) => fp.loaded.set(p, got[i])));
      for (const p of missing) fp.pending.set(p, job);
      // A failed fetch may be tried again by a later call.
      job.then(
        () => missing.forEach((p) => fp.pending.delete(p)),
        () => missing.forEach((p) => fp.pending.delete(p)),
      );
    }
    const waits = [...new Set(pages.map((p) => fp.pending.get(p)).filter((w): w is Promise<void> => w !== undefined))];
    await Promise.all(waits);
  }

  /** Index pages holding `tiles` of field `position`. */
  private pagesOf(position: number, tiles: readonly number[]): number[] {
    const out = new Set<number>();
    for (const t of tiles) out.add(tilePage(this.container, position, t).p);
    return [...out].sort((a, b) => a - b);
  }

  /** The index entries of `tiles` of field `position`, fetching their pages first. */
  private async entries(position: number, tiles: readonly number[]): Promise<(t: number) => TileEntry> {
    const fp = this.pages[position];
    const pages = this.pagesOf(position, tiles);
    if (!fp.holds(pages)) await this.loadPages(position, pages);
    return (t) => fp.entry(this.container, position, t);
  }

  /**
   * Library-internal, for the band reader (src/parallel/read.ts): the
   * valid cells of `tiles` of a field, from their index entries (one fetch
   * of the pages not yet held, none when a read of them fetched those).
   */
  async validCells(name: string | undefined, tiles: readonly number[]): Promise<number> {
    const { position } = this.field(name);
    const entry = await this.entries(position, tiles);
    let valid = 0;
    for (const t of tiles) valid += entry(t).valid;
    return valid;
  }

  /** The decoding constants of field h (one of this archive's headers). */
  private decodingOf(h: FieldHeader): FieldDecoding {
    const fp = this.pageOf.get(h);
    if (fp === undefined) throw new Error(`field ${quoteName(h.name)} is not one of this archive's`);
    return fp.decoding(this.source.label);
  }

  /** Header, directory entry and summary of a field (when `name` is omitted, the first that holds no layer factor). */
  field(name?: string): { header: FieldHeader; directory: FieldDirectory; summary: FieldDirectory['summary']; position: number } {
    const fields = this.header.fields;
    const position = name === undefined ? Math.max(0, fields.findIndex((f) => f.factorOf === undefined)) : fields.findIndex((f) => f.name === name);
    if (position < 0 || position >= this.header.fields.length) {
      throw new InputError(InputCode.Missing, `no field '${name}' in ${this.source.label} (fields: ${this.names.join(', ') || 'none'})`);
    }
    const directory = this.directory.fields[position];
    return { header: this.header.fields[position], directory, summary: directory.summary, position };
  }

  /** The index entry of one tile (fetching its index page when not yet held). */
  async tileEntry(name: string | undefined, t: number): Promise<TileEntry> {
    const { header: h, position } = this.field(name);
    const n = tileCount(h);
    if (!Number.isInteger(t) || t < 0 || t >= n) throw new InputError(InputCode.Option, `field '${h.name}' has tiles 0..${n - 1}, not ${t}`);
    return (await this.entries(position, [t]))(t);
  }

  /** Fetch, check and decode one tile. */
  async tile(name: string | undefined, t: number, verifyValues = false): Promise<FloatArray> {
    const { header: h } = this.field(name);
    const e = await this.tileEntry(name, t);
    const payload = await this.source.read(e.offset, e.length);
    // Exact tiles ignore a layer: only a LowRank tile needs its factor rows.
    const layer = e.method === Method.LowRank ? this.layerRows(h, verifyValues) : null;
    await layer?.load([t]);
    return this.decodePayload(h, e, t, payload, verifyValues, layer);
  }

  /**
   * The factor rows of field h's layer for one read (null for a field
   * without a layer): read as windows of the factor fields, with the read's
   * `verify`, never from a prefix (spec/FORMAT.md 6.2.2).
   */
  private layerRows(h: FieldHeader, verify: boolean): LayerRows | null {
    if (h.layer === undefined) return null;
    const fields = this.header.fields;
    const window = async (p: number, r0: number, r1: number) => (await this.read(fields[p].name, { rows: [r0, r1], verify })).values as Float64Array;
    return new LayerRows(h, h.layer, fields, window, this.source.label);
  }

  /** Check a fetched payload against the index and decode it (with the layer's term of a LowRank tile of a layered field). */
  private decodePayload(h: FieldHeader, e: TileEntry, t: number, payload: Uint8Array, verifyValues: boolean, layer: LayerRows | null = null): FloatArray {
    const d = this.decodingOf(h);
    const where = `${d.where} tile ${t}`;
    if (crc32(payload) !== e.crc) throw new FormatError(FormatCode.Checksum, `${where}: payload CRC-32 mismatch (payload at offset ${e.offset})`);
    const { method, rank } = payloadHead(payload);
    if (method !== e.method || rank !== e.rank) {
      throw new FormatError(FormatCode.Malformed, `${where}: payload holds method ${method} rank ${rank}, the index says method ${e.method} rank ${e.rank}`);
    }
    const [m, n] = tileShape(h, t);
    const term = layer !== null && e.method === Method.LowRank ? layer.term(t) : null;
    const out = decodeTile(payload, { m, n, dtype: h.dtype, fill: d.fill, where, offset: e.offset, maxRank: this.limits.maxRank, fieldStep: d.step, scratch: this.scratch, layer: term, symbols: this.symbols });
    if (verifyValues && crc32(new Uint8Array(out.buffer, out.byteOffset, out.byteLength)) !== e.value_crc) {
      throw new FormatError(FormatCode.Checksum, `${where}: decoded values differ from those verified at encode time (value CRC-32 mismatch)`);
    }
    return out;
  }

  /**
   * Fetch the payloads of `tiles` (in the given order) in batches of about
   * {@link BATCH_BYTES}, each batch with merged reads, and hand each to
   * `use` in order. With `isolate`, a batch whose merged read fails is
   * fetched again tile by tile, and a tile that cannot be fetched is handed
   * over as its error instead of failing the whole call. `prepare` is
   * awaited with each batch's tiles before they are handed over (a layered
   * field loads the factor rows they need).
   */
  private async eachPayload(
    entry: (t: number) => TileEntry,
    tiles: readonly number[],
    use: (t: number, payload: Uint8Array | FormatError) => void,
    isolate = false,
    lengthOf: (t: number) => number = (t) => entry(t).length,
    prepare?: (batch: readonly number[]) => Promise<void>,
  ): Promise<void> {
    for (let k = 0; k < tiles.length; ) {
      const batch: number[] = [];
      let bytes = 0;
      while (k < tiles.length && (batch.length === 0 || bytes + lengthOf(tiles[k]) <= BATCH_BYTES)) {
        bytes += lengthOf(tiles[k]);
        batch.push(tiles[k++]);
      }
      const ranges: ByteRange[] = batch.map((t) => ({ offset: entry(t).offset, length: lengthOf(t) }));
      let payloads: (Uint8Array | FormatError)[];
      try {
        payloads = await readRanges(this.source, ranges, this.coalesce);
      } catch (e) {
        if (!isolate || !(e instanceof FormatError)) throw e;
        payloads = [];
        for (const r of ranges) payloads.push(await this.source.read(r.offset, r.length).catch((err: unknown) => (err instanceof FormatError ? err : Promise.reject(err))));
      }
      await prepare?.(batch);
      batch.forEach((t, i) => use(t, payloads[i]));
    }
  }

  /**
   * Decode a field, or a window of it: `rows: [r0, r1]` and `cols: [c0, c1]`
   * (half-open; each defaults to the whole extent). Only the tiles the
   * window intersects are fetched (adjacent and near payloads in one read
   * each) and decoded, then cropped. Several reads may run at once on one
   * archive.
   *
   * Missing cells come back bit for bit as stored: NaN, infinities and the
   * fill value as themselves. A field packed from a NetCDF variable that
   * declares a `missing_value` beside its `_FillValue` stores the cells of
   * that other value as a quiet NaN mark; `restoreMissing(header, values)`
   * (src/missing.ts) puts the value back, as the command line does.
   */
  async read(name?: string, options: ReadOptions = {}): Promise<FieldValues> {
    const { header: h, position } = this.field(name);
    const { slices, rows, cols } = checkWindow(h, options);
    const verify = options.verify === true;
    const bound = options.bound === undefined ? undefined : typeof options.bound === 'string' ? parseBound(options.bound) : checkBound(options.bound);
    const [s0, s1] = slices;
    const [r0, r1] = rows;
    const [c0, c1] = cols;
    const width = c1 - c0;
    const plane = (r1 - r0) * width;
    checkReadCells((s1 - s0) * plane, this.limits, `${this.source.label} field ${quoteName(h.name)}`);
    const tiles: number[] = [];
    for (let s = s0; s < s1; s++) tiles.push(...windowTiles(h, s, r0, r1, c0, c1));
    // A window that is one whole tile is that tile's decoded values (which are the decoder's own): no output to
    // fill and no copy (a read of a small field in one tile, as bench/'s volcano grid is).
    const one = tiles.length === 1 && sameBox(h, tiles[0], r0, r1, c0, c1);
    let values = one ? null : allocate(h.dtype, (s1 - s0) * plane, h.name);
    const entry = await this.entries(position, tiles);
    const plan = this.progressivePlan(h, entry, bound);
    const layer = this.layerRows(h, verify);
    const tally = { max: 0, sq: 0, valid: 0, prefixTiles: 0 };
    await this.eachPayload(entry, tiles, (t, payload) => {
      if (payload instanceof FormatError) throw payload;
      const choice = plan(t);
      const e = entry(t);
      const tile = choice.prefix ? this.decodePrefix(h, e, t, payload, choice.crc, layer) : this.decodePayload(h, e, t, payload, verify, layer);
      if (!(choice.maxErr <= tally.max)) tally.max = choice.maxErr;
      tally.sq += e.valid * choice.rmse * choice.rmse;
      tally.valid += e.valid;
      if (choice.prefix) tally.prefixTiles++;
      if (values === null) {
        values = tile;
        return;
      }
      // The part of the tile inside the window, to its place in the output (slice s at row (s - s0) * window rows).
      const { s, i0, j0 } = tileOrigin(h, t);
      const [m, n] = tileShape(h, t);
      const a = Math.max(r0, i0);
      const lo = Math.max(c0, j0);
      copyBlock(tile, n, a - i0, lo - j0, Math.min(r1, i0 + m) - a, Math.min(c1, j0 + n) - lo, values, width, (s - s0) * (r1 - r0) + a - r0, lo - c0);
    }, false, (t) => plan(t).length, layer ? (batch) => layer.load(batch.filter((t) => entry(t).method === Method.LowRank)) : undefined);
    const achieved = { maxErr: tally.max, rmse: tally.valid > 0 ? Math.sqrt(tally.sq / tally.valid) : 0 };
    const whole = options.slices === undefined && options.rows === undefined && options.cols === undefined;
    const shape = whole && h.nd_shape ? ndShape(h) : hasSlices(h) ? [s1 - s0, r1 - r0, width] : [r1 - r0, width];
    if (values === null) throw new Error(`the read of field ${quoteName(h.name)} decoded no tile`);
    return { name: h.name, dtype: h.dtype, shape, values, window: { ...(hasSlices(h) ? { slices: [s0, s1] as [number, number] } : {}), rows: [r0, r1], cols: [c0, c1] }, achieved, prefixTiles: tally.prefixTiles };
  }

  /**
   * For each tile, what to read: the shortest recorded prefix whose error
   * meets the requested bound, else the whole payload.
   */
  private progressivePlan(h: FieldHeader, entry: (t: number) => TileEntry, b: Bound | undefined): (t: number) => TileChoice {
    const whole = (t: number): TileChoice => {
      const e = entry(t);
      return { length: e.length, prefix: false, crc: e.crc, maxErr: e.max_err, rmse: e.rmse };
    };
    if (b === undefined) return whole;
    const range = h.bound.range;
    const tol = resolveBound(b, range ? range[1] - range[0] : 0);
    const pointwise = isPointwise(b.mode);
    return (t) => {
      const p = entry(t).prefix;
      for (let k = 0; k < p.length; k += 4) {
        const [length, crc, maxErr, rmse] = p.slice(k, k + 4);
        if (pointwise ? maxErr <= tol : rmse <= tol) return { length, prefix: true, crc, maxErr, rmse };
      }
      return whole(t);
    };
  }

  /** Check a fetched prefix against its recorded CRC and decode its factor groups. */
  private decodePrefix(h: FieldHeader, e: TileEntry, t: number, bytes: Uint8Array, crc: number, layer: LayerRows | null): FloatArray {
    const d = this.decodingOf(h);
    const where = `${d.where} tile ${t}`;
    if (crc32(bytes) !== crc) throw new FormatError(FormatCode.Checksum, `${where}: prefix of ${bytes.length} bytes fails its CRC-32 (payload at offset ${e.offset})`);
    const groups = prefixLengths(bytes).indexOf(bytes.length);
    if (groups < 0) throw new FormatError(FormatCode.Malformed, `${where}: the index lists a prefix of ${bytes.length} bytes that does not end at a factor group`);
    const [m, n] = tileShape(h, t);
    // A prefix includes the layer's term (spec/FORMAT.md 18): only LowRank payloads have prefixes.
    const term = layer !== null && e.method === Method.LowRank ? layer.term(t) : null;
    return decodeTile(bytes, { m, n, dtype: h.dtype, fill: d.fill, where, offset: e.offset, maxRank: this.limits.maxRank, fieldStep: d.step, groups, scratch: this.scratch, layer: term, symbols: this.symbols });
  }

  /**
   * Check every tile: payload CRC, decoding, decoded-value CRC, and the
   * recorded error against the bound. With `against` (original values per
   * field name, or one array for a one-field archive), also measure the
   * actual error and compare special cells bit for bit. An original given
   * as a {@link BandOriginal} is read a band of tile rows at a time, as the
   * tiles are checked in order, so it need not fit in memory; the report is
   * the same as for its values given whole. `onProgress` is
   * called after each tile with the tiles checked so far and the tiles of
   * all fields (for progress displays; it must not throw).
   */
  async check(against?: FloatArray | Record<string, FloatArray | BandOriginal>, onProgress?: (done: number, total: number) => void): Promise<CheckReport> {
    const report: CheckReport = { ok: true, fields: [], failures: [] };
    // One array is the original of the one field a user reads (factor fields of a layer have none).
    const main = this.mainNames;
    if (against !== undefined && ArrayBuffer.isView(against) && main.length !== 1) {
      throw new InputError(InputCode.Option, `the archive holds ${main.length} fields: give the originals by field name`);
    }
    const allTiles = this.header.fields.reduce((a, h) => a + tileCount(h), 0);
    let checked = 0;
    for (const h of this.header.fields) {
      const { position, summary } = this.field(h.name);
      const given = against === undefined ? undefined : ArrayBuffer.isView(against) ? (h.factorOf === undefined ? against : undefined) : against[h.name];
      const want = h.dtype === 'f32' ? Float32Array : Float64Array;
      const bands = given !== undefined && !ArrayBuffer.isView(given) ? given : undefined;
      if (bands !== undefined && typeof (bands as Partial<BandOriginal>).band !== 'function') {
        throw new InputError(InputCode.Option, `original for field '${h.name}' must be a typed array of its values or an object with a band(r0, count) method`);
      }
      const whole = given === undefined || bands !== undefined ? undefined : given instanceof want ? given : want.from(given as FloatArray);
      const orig = whole ?? bands;
      const fail = (tile: number, what: string) => report.failures.push({ field: h.name, tile, what });
      const tol = h.bound.tolerance;
      const pointwise = isPointwise(h.bound.mode);
      const [rows, cols] = h.shape;
      const nslices = h.slices ?? 1;
      if (whole !== undefined && whole.length !== nslices * rows * cols) {
        const what = h.nd_shape ? h.nd_shape.join('x') : nslices > 1 ? `${nslices}x${rows}x${cols}` : `${rows}x${cols}`;
        throw new InputError(InputCode.Shape, `original for field '${h.name}' has ${whole.length} values, the archive ${what}`);
      }
      const total = new ErrorTally();
      let specials = 0;
      const fw = fillWords(h.fill, h.dtype);
      const fp = this.pages[position];
      const all = await this.pagesForCheck(position, (what) => fail(-1, what));
      const entry = (t: number) => fp.entry(this.container, position, t);
      // A layered field's tiles need the factor rows of each batch. When some cannot be read, the batch's
      // failure is reported once (with the factor field's own failures under its name), and each LowRank tile
      // of the batch is tried on its own: those whose rows fail are reported by tile, as a read of them fails,
      // and the others are checked on the rows that do read.
      const layer = this.layerRows(h, true);
      const layerFailed = new Map<number, string>();
      const loadLayer = async (batch: readonly number[]) => {
        layerFailed.clear();
        const lowRank = batch.filter((t) => entry(t).method === Method.LowRank);
        try {
          await layer!.load(lowRank);
          return;
        } catch (e) {
          if (!(e instanceof FormatError)) throw e;
          fail(-1, `layer factors of tiles ${batch[0]} to ${batch[batch.length - 1]}: ${e.message}`);
        }
        for (const t of lowRank) {
          try {
            await layer!.load([t]);
          } catch (e) {
            if (!(e instanceof FormatError)) throw e;
            layerFailed.set(t, e.message);
          }
        }
        const readable = lowRank.filter((t) => !layerFailed.has(t));
        try {
          await layer!.load(readable);
        } catch (e) {
          if (!(e instanceof FormatError)) throw e;
          for (const t of readable) layerFailed.set(t, e.message);
        }
      };
      // A band original: the band of the tile row being checked, read once (tiles come in order).
      let held: { r0: number; r1: number; values: FloatArray } | null = null;
      const cut = (t: number): FloatArray => {
        const { s, i0 } = tileOrigin(h, t);
        const r = s * rows + i0;
        const m = tileShape(h, t)[0];
        if (held === null || r < held.r0 || r + m > held.r1) {
          const got = (bands as BandOriginal).band(r, m);
          if (!(got instanceof Float32Array || got instanceof Float64Array)) throw new InputError(InputCode.Option, `original for field '${h.name}': band(${r}, ${m}) returned no Float32Array or Float64Array`);
          if (got.length !== m * cols) throw new InputError(InputCode.Shape, `original for field '${h.name}': rows ${r}..${r + m} hold ${got.length} values, not ${m * cols}`);
          held = { r0: r, r1: r + m, values: got instanceof want ? got : want.from(got) };
        }
        return extract(held.values, h, t, held.r0);
      };
      await this.eachPayload(entry, all, (t, payload) => {
        onProgress?.(++checked, allTiles);
        let tile: FloatArray;
        const ix = entry(t);
        try {
          if (payload instanceof FormatError) throw payload;
          const rowsFailed = ix.method === Method.LowRank ? layerFailed.get(t) : undefined;
          if (rowsFailed !== undefined) throw new FormatError(FormatCode.Malformed, `its layer's factor rows cannot be read: ${rowsFailed}`);
          tile = this.decodePayload(h, ix, t, payload, true, layer);
        } catch (e) {
          if (!(e instanceof FormatError)) throw e;
          fail(t, e.message);
          return;
        }
        // Recorded errors are stored rounded up to binary32 (spec/FORMAT.md, section 7.3): compared with the bound rounded alike.
        if (pointwise && !(ix.max_err <= up32(tol))) fail(t, `recorded max error ${ix.max_err} exceeds the bound ${tol}`);
        if (orig) {
          const part = whole ? cutTile(whole, h, t) : cut(t);
          const { tally, differ } = compareTile(part, tile, fw);
          specials += differ;
          total.merge(tally);
          if (pointwise && !(tally.max <= tol)) fail(t, `measured max error ${tally.max} exceeds the bound ${tol}`);
        }
      }, true, undefined, layer ? loadLayer : undefined);
      if (!pointwise && !(summary.rmse <= up32(tol))) fail(-1, `recorded RMSE ${summary.rmse} exceeds the bound ${tol} (rounded up to binary32 as recorded figures are)`);
      const report1: CheckReport['fields'][number] = {
        name: h.name,
        tiles: tileCount(h),
        mode: h.bound.mode,
        tolerance: tol,
        recorded: { maxErr: summary.max_err, rmse: summary.rmse },
      };
      if (orig) {
        const rmse = total.rmse;
        report1.measured = { maxErr: total.max, rmse, specialMismatches: specials };
        if (specials > 0) fail(-1, `${specials} missing or special cells differ from the original`);
        if (!pointwise && !(rmse <= tol)) fail(-1, `measured RMSE ${rmse} exceeds the bound ${tol}`);
      }
      report.fields.push(report1);
    }
    report.ok = report.failures.length === 0;
    return report;
  }

  /**
   * Every index page of field `position`, for {@link check}: a page that
   * cannot be read is reported to `fail` and its tiles are left out, and
   * with every page held the pages are joined (their summary checked).
   * Returns the tiles of the pages held, in tile order.
   */
  private async pagesForCheck(position: number, fail: (what: string) => void): Promise<number[]> {
    const fp = this.pages[position];
    const pages = Array.from({ length: pageCount(fp.h, fp.d.page) }, (_, p) => p);
    try {
      await this.loadPages(position, pages);
    } catch (e) {
      if (!(e instanceof FormatError)) throw e;
      for (const p of pages) {
        await this.loadPages(position, [p]).catch((err: unknown) => {
          if (!(err instanceof FormatError)) throw err;
          fail(err.message);
        });
      }
    }
    const all: number[] = [];
    for (const p of pages) {
      const pg = fp.loaded.get(p);
      if (pg !== undefined) all.push(...pg.tiles);
    }
    all.sort((a, b) => a - b);
    if (all.length === tileCount(fp.h)) {
      try {
        joinPages(this.container, position, pages.map((p) => fp.loaded.get(p)!), this.source.label);
      } catch (e) {
        if (!(e instanceof FormatError)) throw e;
        fail(e.message);
      }
    }
    return all;
  }

  /** Release the source. */
  async close(): Promise<void> {
    await this.source.close?.();
  }
}

/**
 * A decoded tile against the original's same cells (both of the field's
 * dtype): the errors over the original's valid cells, and how many of its
 * other cells (missing, special) the decoded tile does not hold bit for bit.
 */
function compareTile(part: FloatArray, tile: FloatArray, fw: Uint32Array | null): { tally: ErrorTally; differ: number } {
  const cls = classify(part, fw);
  const got = classify(tile, fw);
  const ow = new Uint32Array(part.buffer, part.byteOffset, part.byteLength / 4);
  const dw = new Uint32Array(tile.buffer, tile.byteOffset, tile.byteLength / 4);
  const wpv = part instanceof Float32Array ? 1 : 2;
  const tally = new ErrorTally();
  let differ = 0;
  for (let c = 0; c < part.length; c++) {
    if (cls.codes[c] !== Cell.Valid) {
      let same = got.codes[c] === cls.codes[c];
      for (let k = 0; k < wpv; k++) same = same && ow[c * wpv + k] === dw[c * wpv + k];
      if (!same) differ++;
      continue;
    }
    tally.add(Math.abs(part[c] - tile[c]));
  }
  return { tally, differ };
}

/** Whether tile t of field h is exactly the window rows [r0, r1) x cols [c0, c1) (of its slice). */
function sameBox(h: FieldHeader, t: number, r0: number, r1: number, c0: number, c1: number): boolean {
  const { i0, j0 } = tileOrigin(h, t);
  const [m, n] = tileShape(h, t);
  return i0 === r0 && j0 === c0 && i0 + m === r1 && j0 + n === c1;
}

/** Output values for a whole field, refusing sizes this runtime cannot hold. */
function allocate(dtype: Dtype, cells: number, name: string): FloatArray {
  try {
    return dtype === 'f32' ? new Float32Array(cells) : new Float64Array(cells);
  } catch {
    throw new FormatError(FormatCode.Limit, `field '${name}' has ${cells} values, too many to decode at once here`);
  }
}

/** Check a range of a window: integers with 0 <= start < end <= extent. */
function checkRange(v: unknown, extent: number, what: 'slices' | 'rows' | 'cols', field: string): [number, number] {
  if (v === undefined) return [0, extent];
  const ok = Array.isArray(v) && v.length === 2 && v.every((x) => Number.isSafeInteger(x));
  if (!ok) throw new InputError(InputCode.Option, `${what} of a window must be [start, end] with integer ends, got ${JSON.stringify(v)}`);
  const [a, b] = v as [number, number];
  if (a < 0 || b > extent || a >= b) {
    const why = a >= b ? 'is empty (start must be below end)' : `lies outside ${what} 0..${extent}`;
    throw new InputError(InputCode.Option, `field '${field}' has ${extent} ${what === 'cols' ? 'columns' : what}; ${what} [${a}, ${b}) ${why}`);
  }
  return [a, b];
}

/** The window a read asks for, checked against the field (also for band-by-band reads, src/parallel/read.ts). */
export function checkWindow(h: FieldHeader, o: ReadOptions): { slices: [number, number]; rows: [number, number]; cols: [number, number] } {
  if (typeof o !== 'object' || o === null) throw new InputError(InputCode.Option, `read options must be an object, got ${String(o)}`);
  const unknown = Object.keys(o).filter((k) => !READ_KEYS.includes(k));
  if (unknown.length > 0) throw new InputError(InputCode.Option, `unknown read option${unknown.length > 1 ? 's' : ''} ${unknown.map((k) => `'${k}'`).join(', ')} (known: ${READ_KEYS.join(', ')})`);
  if (o.verify !== undefined && typeof o.verify !== 'boolean') throw new InputError(InputCode.Option, `verify must be true or false, got ${String(o.verify)}`);
  if (o.slices !== undefined && !hasSlices(h)) throw new InputError(InputCode.Option, `field '${h.name}' is a plain 2-D field: it has no slices to choose`);
  return {
    slices: checkRange(o.slices, h.slices ?? 1, 'slices', h.name),
    rows: checkRange(o.rows, h.shape[0], 'rows', h.name),
    cols: checkRange(o.cols, h.shape[1], 'cols', h.name),
  };
}

/** True when reads of the field count slices: more than one, or an N-D variable laid out as slices. */
export function hasSlices(h: FieldHeader): boolean {
  return (h.slices ?? 1) > 1 || h.layout === 'slices';
}

/** Tile t cut out of the original values (C order: slice s is rows [s * R, (s + 1) * R) of the stacked matrix). */
function extract(values: FloatArray, h: FieldHeader, t: number, firstRow = 0): FloatArray {
  const cols = h.shape[1];
  const { s, i0, j0 } = tileOrigin(h, t);
  const r = s * h.shape[0] + i0 - firstRow;
  const [m, n] = tileShape(h, t);
  const out = h.dtype === 'f32' ? new Float32Array(m * n) : new Float64Array(m * n);
  for (let i = 0; i < m; i++) out.set(values.subarray((r + i) * cols + j0, (r + i) * cols + j0 + n), i * n);
  return out;
}

/** What {@link open} reads an archive from. */
export type ArchiveInput = Uint8Array | ArrayBuffer | ByteSource | URL | string;

const OPEN_KEYS = ['limits', 'coalesce'];

/** A short description of a value for messages: its type, never its contents. */
function kindOf(x: unknown): string {
  if (x === null) return 'null';
  if (typeof x !== 'object') return typeof x;
  const name = (Object.getPrototypeOf(x) as { constructor?: { name?: unknown } } | null)?.constructor?.name;
  return typeof name === 'string' && name.length > 0 ? `an object (${name})` : 'an object';
}

/** True for an object with the two required methods of a {@link ByteSource}. */
function isByteSource(x: unknown): x is ByteSource {
  return typeof x === 'object' && x !== null && typeof (x as ByteSource).size === 'function' && typeof (x as ByteSource).read === 'function';
}

/**
 * A caller's {@link ByteSource}, with what it answers checked: a size that
 * is not a non-negative integer, or a read that is not a Uint8Array of the
 * length asked for, is an InputError (the source is the caller's argument).
 * What the source throws passes on unchanged.
 */
class CheckedSource implements ByteSource {
  readonly label: string;
  readonly readMany?: (ranges: readonly ByteRange[]) => Promise<Uint8Array[]>;
  constructor(private readonly inner: ByteSource) {
    this.label = typeof inner.label === 'string' ? inner.label : 'archive';
    if (typeof inner.readMany === 'function') {
      const many = inner.readMany.bind(inner);
      this.readMany = async (ranges) => {
        const got: unknown = await many(ranges);
        if (!Array.isArray(got) || got.length !== ranges.length) throw new InputError(InputCode.Option, `${this.label}: the source's readMany() gave ${kindOf(got)}, not ${ranges.length} byte arrays`);
        return ranges.map((r, i) => this.checked(got[i], r.offset, r.length));
      };
    }
  }
  async size(): Promise<number> {
    const n: unknown = await this.inner.size();
    if (typeof n !== 'number' || !Number.isSafeInteger(n) || n < 0) throw new InputError(InputCode.Option, `${this.label}: the source's size() gave ${typeof n === 'number' ? n : kindOf(n)}, not a byte count`);
    return n;
  }
  async read(offset: number, length: number): Promise<Uint8Array> {
    return this.checked(await this.inner.read(offset, length), offset, length);
  }
  async close(): Promise<void> {
    if (typeof this.inner.close === 'function') await this.inner.close();
  }
  private checked(b: unknown, offset: number, length: number): Uint8Array {
    if (!(b instanceof Uint8Array) || b.length !== length) {
      throw new InputError(InputCode.Option, `${this.label}: the source's read(${offset}, ${length}) gave ${b instanceof Uint8Array ? `${b.length} bytes` : kindOf(b)}, not ${length} bytes`);
    }
    return b;
  }
}

/**
 * The byte source {@link open} reads from, and whether open made it (and so
 * closes it when opening fails). `file` opens a path or file: URL; without
 * it (the browser-safe entry) such input is refused.
 */
async function sourceOf(input: unknown, file?: (path: string | URL) => Promise<ByteSource>): Promise<{ src: ByteSource; own: boolean }> {
  if (input instanceof Uint8Array) return { src: new MemorySource(input), own: true };
  if (input instanceof ArrayBuffer) return { src: new MemorySource(new Uint8Array(input)), own: true };
  if (ArrayBuffer.isView(input)) {
    throw new InputError(InputCode.Option, `open() takes an archive's bytes as a Uint8Array or ArrayBuffer, got ${kindOf(input)}; to archive values, use pack()`);
  }
  if (typeof input === 'string' || input instanceof URL) {
    const text = String(input);
    if (/^https?:\/\//i.test(text)) return { src: new HttpSource(text), own: true };
    if (file === undefined) throw new InputError(InputCode.Option, `open() here reads bytes, a ByteSource or an http(s) URL; '${text}' is none (file paths are read by the Node entry, 'rankfield')`);
    if (text.length === 0) throw new InputError(InputCode.Option, 'open() was given an empty path');
    return { src: await file(input), own: true };
  }
  if (isByteSource(input)) return { src: new CheckedSource(input), own: false };
  throw new InputError(InputCode.Option, `open() takes a Uint8Array, an ArrayBuffer, a ByteSource (size() and read()), an http(s) URL${file ? ' or a file path' : ''}; got ${kindOf(input)}`);
}

/** Check the options of {@link open}: an object of known keys, or undefined. */
function checkOpenOptions(options: unknown): OpenOptions {
  if (options === undefined) return {};
  if (typeof options !== 'object' || options === null || Array.isArray(options)) throw new InputError(InputCode.Option, `open options must be an object, got ${kindOf(options)}`);
  const unknown = Object.keys(options).filter((k) => !OPEN_KEYS.includes(k));
  if (unknown.length > 0) throw new InputError(InputCode.Option, `unknown open option${unknown.length > 1 ? 's' : ''} ${unknown.map((k) => `'${k}'`).join(', ')} (known: ${OPEN_KEYS.join(', ')})`);
  const o = options as OpenOptions;
  if (o.coalesce !== undefined && (typeof o.coalesce !== 'object' || o.coalesce === null)) throw new InputError(InputCode.Option, `coalesce must be an object, got ${kindOf(o.coalesce)}`);
  return o;
}

/** Open an archive on a source made by {@link sourceOf}, closing a source of open's own if it fails. */
export async function openOn(input: unknown, options: unknown, file?: (path: string | URL) => Promise<ByteSource>): Promise<Archive> {
  const o = checkOpenOptions(options);
  const { src, own } = await sourceOf(input, file);
  try {
    const container = await readContainer(src, o.limits);
    return new Archive(src, container, o.coalesce);
  } catch (e) {
    if (own) await src.close?.().catch(() => undefined);
    throw e;
  }
}

/**
 * Open an archive from bytes in memory (Uint8Array, or the ArrayBuffer a
 * `fetch` response gives), any {@link ByteSource}, or an http(s) URL (read
 * with an {@link HttpSource} of default options). A malformed archive is a
 * FormatError; an argument of any other kind an InputError.
 */
export async function open(source: Uint8Array | ArrayBuffer | ByteSource | URL | string, options: OpenOptions = {}): Promise<Archive> {
  return openOn(source, options);
}
