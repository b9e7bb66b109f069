/**
 * Reading a field, or a window of it, band by band: bands of whole tile
 * rows are decoded in parallel on a {@link WorkerPool} (each worker opens
 * the archive itself, from its path, URL or shared bytes, and reads its
 * bands as windows with Archive.read) and handed to the caller in order,
 * so a field is written out without ever being whole in memory: at most
 * {@link BANDS_PER_THREAD} bands per thread are in flight.
 */
import { checkWindow, hasSlices, open, type Archive, type ReadOptions } from '../archive.js';
import { checkBound, parseBound } from '../codec/bound.js';
import { FormatCode, FormatError, InputCode, InputError } from '../errors.js';
import { HttpSource } from '../io/http-source.js';
import { windowTiles } from '../geometry.js';
import { MemorySource, type ByteSource } from '../io/source.js';
import { FileSource } from '../io/file-source.js';
import type { Bound, Dtype, FloatArray } from '../types.js';
import { checkThreads, WorkerPool } from './pool.js';

/** Where workers open an archive: a file path, an http(s) URL, or the archive's bytes. */
export type ArchiveLocation = string | Uint8Array;

/** Options of {@link readBands}: a window as for Archive.read, and the threads. */
export interface BandReadOptions extends ReadOptions {
  /** Threads decoding bands, this one among them (default: the core count); 1 decodes in this thread alone. */
  threads?: number;
  /** Where workers open the archive (needed for more than one thread): the path, URL or bytes `archive` was opened from. */
  location?: ArchiveLocation;
  /** A pool of worker threads kept by the caller across calls (not closed here); `threads` is then the pool's. */
  pool?: WorkerPool;
  /** Values per band to aim at (default 2^20); a band is at least one tile row, unless a tile row holds more than `maxBandCells` values. */
  bandCells?: number;
  /** Most values in one band (default 2^22): a larger tile row is read in bands of fewer rows, a wider row in runs of tile columns (see planBands). */
  maxBandCells?: number;
}

/** What {@link readBands} read: Archive.read's result without the values, which went to the caller band by band. */
export interface BandsRead {
  name: string;
  dtype: Dtype;
  /** The shape Archive.read would give the whole window. */
  shape: number[];
  window: { slices?: [number, number]; rows: [number, number]; cols: [number, number] };
  achieved: { maxErr: number; rmse: number };
  prefixTiles: number;
}

/** Bands per thread decoded ahead of the one being written. */
const BANDS_PER_THREAD = 2;
const BAND_CELLS = 1 << 20;
/** Most values in one band (16 MiB of float32), whatever the tile shape; see planBands. */
const MAX_BAND_CELLS = 1 << 22;
/** Fields whose tiles hold more values are decoded in the calling thread alone (see readBands). */
const ONE_THREAD_TILE_CELLS = 1 << 18;
/** Windows of fewer values are decoded in the calling thread. */
const MIN_PARALLEL_CELLS = 1 << 16;

/** One band: a window of one slice. */
interface BandRequest {
  name: string;
  options: ReadOptions;
  /** Tiles of the band, for the count of valid values behind `achieved`; empty when an earlier band counts them. */
  tiles: number[];
}

interface BandResult {
  values: FloatArray;
  achieved: { maxErr: number; rmse: number };
  prefixTiles: number;
  valid: number;
}

/** Decode one band with Archive.read, and count the valid values of its tiles (none when its tiles are counted in an earlier band). */
async function decodeBand(archive: Archive, req: BandRequest): Promise<BandResult> {
  const f = await archive.read(req.name, req.options);
  const valid = req.tiles.length > 0 ? await archive.validCells(req.name, req.tiles) : 0;
  return { values: f.values, achieved: f.achieved, prefixTiles: req.tiles.length > 0 ? f.prefixTiles : 0, valid };
}

/** Archives open in this worker, by read key. */
const opened = new Map<number, Promise<Archive>>();

function sourceOf(location: ArchiveLocation): Promise<ByteSource> {
  if (typeof location !== 'string') return Promise.resolve(new MemorySource(location));
  return /^https?:\/\//i.test(location) ? Promise.resolve(new HttpSource(location)) : FileSource.open(location);
}

/** Open an archive in a worker and check it is the one the reading thread opened. */
async function openAgain(location: ArchiveLocation, size: number): Promise<Archive> {
  const src = await sourceOf(location);
  const a = await open(src).catch(async (e: unknown) => {
    await src.close?.();
    throw e;
  });
  if (a.size !== size) {
    await a.close();
    throw new FormatError(FormatCode.Malformed, `${src.label}: the archive changed while being read (${size} bytes at open, now ${a.size})`);
  }
  return a;
}

/** The tasks a worker runs for reading (see worker.ts). */
export const readTasks = {
  async 'read-band'(body: { key: number; location: ArchiveLocation; size: number; req: BandRequest }) {
    let a = opened.get(body.key);
    if (a === undefined) {
      a = openAgain(body.location, body.size);
      opened.set(body.key, a);
    }
    const r = await decodeBand(await a, body.req);
    return { result: r, transfer: [r.values.buffer as ArrayBuffer] };
  },
  async 'read-forget'(body: { key: number }) {
    const a = opened.get(body.key);
    opened.delete(body.key);
    await a?.then((x) => x.close()).catch(() => undefined);
    return { result: null };
  },
};

let nextKey = 1;

/** Archive bytes in memory, in a SharedArrayBuffer so that every worker reads them without a copy of its own. */
function shareBytes(location: ArchiveLocation): ArchiveLocation {
  if (typeof location === 'string' || location.buffer instanceof SharedArrayBuffer) return location;
  const out = new Uint8Array(new SharedArrayBuffer(location.length));
  out.set(location);
  return out;
}

/**
 * Bands of whole tile rows covering the window, slice by slice: about
 * `cells` values each, and with more than one thread small enough that
 * every thread has bands to decode (at most 1 / (BANDS_PER_THREAD x
 * threads) of the window's tile rows). A window of a few tile rows in one
 * thread is one band: one read, with its payloads fetched together.
 *
 * A tile row of more than `most` values (tall tiles across
 * a wide window: a few KB of archive can declare them) is cut into bands of
 * fewer rows, each decoding the tile row's tiles again; a row of more than
 * that many values into runs of whole tile columns, one row at a time. The
 * bands stay in C order, so the values are written as they come, and no
 * band holds more than `most` values. Each tile is counted
 * (for `achieved`) in the first band that decodes it only.
 */
function planBands(archive: Archive, name: string, o: ReadOptions, cells: number, most: number, threads: number): BandRequest[] {
  const { header: h } = archive.field(name);
  const { slices, rows, cols } = checkWindow(h, o);
  const [tr, tc] = h.tile;
  const width = cols[1] - cols[0];
  const tileRows = Math.ceil(rows[1] / tr) - Math.floor(rows[0] / tr);
  const share = threads > 1 ? Math.ceil(tileRows / (BANDS_PER_THREAD * threads)) : Infinity;
  const keep = { ...(o.verify !== undefined ? { verify: o.verify } : {}), ...(o.bound !== undefined ? { bound: o.bound } : {}) };
  const out: BandRequest[] = [];
  const band = (s: number, a: number, b: number, c: [number, number], counted: boolean) =>
    out.push({ name: h.name, options: { ...keep, ...(hasSlices(h) ? { slices: [s, s + 1] as [number, number] } : {}), rows: [a, b], cols: c }, tiles: counted ? windowTiles(h, s, a, b, c[0], c[1]) : [] });
  if (tr * width <= most) {
    const per = tr * Math.max(1, Math.min(Math.floor(cells / (tr * width)), share, Math.floor(most / (tr * width))));
    for (let s = slices[0]; s < slices[1]; s++) {
      for (let a = rows[0]; a < rows[1]; ) {
        const b = Math.min(rows[1], (Math.floor(a / per) + 1) * per);
        band(s, a, b, cols, true);
        a = b;
      }
    }
    return out;
  }
  // Rows per band within a tile row, and runs of whole tile columns when one row is too wide.
  const per = Math.max(1, Math.floor(most / width));
  const step = tc * Math.max(1, Math.floor(most / tc));
  const runs: [number, number][] = [];
  if (width <= most) runs.push(cols);
  else for (let c = cols[0]; c < cols[1]; ) runs.push([c, (c = Math.min(cols[1], (Math.floor(c / step) + 1) * step))]);
  for (let s = slices[0]; s < slices[1]; s++) {
    for (let t0 = rows[0]; t0 < rows[1]; ) {
      const t1 = Math.min(rows[1], (Math.floor(t0 / tr) + 1) * tr);
      for (let a = t0; a < t1; a += per) {
        if (runs.length === 1) band(s, a, Math.min(t1, a + per), cols, a === t0);
        else for (const run of runs) band(s, a, a + 1, run, a === t0);
      }
      t0 = t1;
    }
  }
  return out;
}

/**
 * Decode a field of `archive` (the first when `name` is omitted), or a
 * window of it, band by band, handing each band's values (row-major, whole
 * rows of the window, slice after slice) to `onBand` in order; the bands
 * together are the values Archive.read would return. With more than one
 * thread, bands are decoded on worker threads that open `location` (the
 * path, URL or bytes `archive` was opened from) themselves.
 */
export async function readBands(archive: Archive, name: string | undefined, o: BandReadOptions, onBand: (values: FloatArray) => void | Promise<void>): Promise<BandsRead> {
  const { threads: given, location, bandCells = BAND_CELLS, maxBandCells = MAX_BAND_CELLS, pool: kept, ...rest } = o;
  const threads = kept?.threads ?? checkThreads(given);
  for (const [k, v] of [['bandCells', bandCells], ['maxBandCells', maxBandCells]] as const) {
    if (!Number.isSafeInteger(v) || v < 1) throw new InputError(InputCode.Option, `${k} must be a positive integer, got ${String(v)}`);
  }
  const { header: h } = archive.field(name);
  const read: ReadOptions = { ...rest };
  if (typeof read.bound === 'string') read.bound = parseBound(read.bound);
  else if (read.bound !== undefined) read.bound = checkBound(read.bound as Bound);
  const known = readShape(archive, h.name, read);
  const { shape } = known;
  const cells = shape.reduce((a, b) => a * b, 1);
  // Below MIN_PARALLEL_CELLS starting workers costs more than decoding here. Tiles of more than
  // ONE_THREAD_TILE_CELLS are decoded in one thread: each thread decoding them carries about 100 MB
  // of freed tile buffers not yet collected (peak RSS of unpack to .npy of a constant 8192 x 8192
  // float32 field of 1024 x 1024 tiles, /usr/bin/time -v: 318 MB on two threads, 208 MB on one).
  const one = cells < MIN_PARALLEL_CELLS || h.tile[0] * h.tile[1] > ONE_THREAD_TILE_CELLS;
  const bands = planBands(archive, h.name, read, bandCells, maxBandCells, one ? 1 : threads);
  const workers = one ? 1 : Math.min(threads, bands.length);
  if (workers > 1 && location === undefined) throw new InputError(InputCode.Option, 'reading with more than one thread needs the location the archive was opened from');
  const shared = workers > 1 ? shareBytes(location!) : location;
  // The calling thread decodes bands too (from its own archive), as one of the threads.
  const local = (kind: string, body: unknown) => (kind === 'read-band' ? decodeBand(archive, (body as { req: BandRequest }).req) : null);
  // Bands are few and long: each goes to whichever thread is free first (depth 1), so that a worker does not
  // take three while this thread decodes its one.
  const pool = workers > 1 ? (kept ?? new WorkerPool(workers, { local, depth: 1, preload: 'read-' })) : null;
  const key = nextKey++;
  const decode = (req: BandRequest): Promise<BandResult> =>
    pool ? pool.run<BandResult>('read-band', { key, location: shared, size: archive.size, req }) : decodeBand(archive, req);
  const tally = { max: 0, sq: 0, valid: 0, prefixTiles: 0 };
  const ahead: Promise<BandResult>[] = [];
  try {
    const take = async () => {
      const r = await ahead.shift()!;
      await onBand(r.values);
      if (!(r.achieved.maxErr <= tally.max)) tally.max = r.achieved.maxErr;
      tally.sq += r.valid * r.achieved.rmse * r.achieved.rmse;
      tally.valid += r.valid;
      tally.prefixTiles += r.prefixTiles;
    };
    for (const req of bands) {
      const p = decode(req);
      // Awaited in order below; a failure of a later band must not go unhandled meanwhile.
      p.catch(() => undefined);
      ahead.push(p);
      if (ahead.length >= BANDS_PER_THREAD * workers) await take();
    }
    while (ahead.length > 0) await take();
  } finally {
    // Bands still being decoded are let finish (a caller's pool is left idle), then the workers close the archive.
    if (pool && !pool.failed) {
      await Promise.allSettled(ahead);
      await pool.broadcast('read-forget', { key }).catch(() => undefined);
    }
    if (pool !== kept) await pool?.close();
  }
  return { ...known, achieved: { maxErr: tally.max, rmse: tally.valid > 0 ? Math.sqrt(tally.sq / tally.valid) : 0 }, prefixTiles: tally.prefixTiles };
}

/**
 * What a read of this window gives, known before anything is decoded: the
 * field's name and dtype, the shape Archive.read would return (the N-D
 * shape for a whole read of a field that has one) and the window. Throws
 * as Archive.read does for a window that does not fit the field.
 */
export function readShape(archive: Archive, name: string | undefined, o: ReadOptions): Omit<BandsRead, 'achieved' | 'prefixTiles'> {
  const { header: h } = archive.field(name);
  const { slices, rows, cols } = checkWindow(h, { ...(o.slices ? { slices: o.slices } : {}), ...(o.rows ? { rows: o.rows } : {}), ...(o.cols ? { cols: o.cols } : {}) });
  const whole = o.slices === undefined && o.rows === undefined && o.cols === undefined;
  const width = cols[1] - cols[0];
  const shape = whole && h.nd_shape ? h.nd_shape.slice() : hasSlices(h) ? [slices[1] - slices[0], rows[1] - rows[0], width] : [rows[1] - rows[0], width];
  return { name: h.name, dtype: h.dtype, shape, window: { ...(hasSlices(h) ? { slices } : {}), rows, cols } };
}
