/** `rankfield unpack`: decode the fields of an archive, or a window of one, to .npy, raw, CSV or NetCDF. */
import { InvalidArgumentError, type Command } from 'commander';
import { formatNpy, npyHeader } from '../io/npy.js';
import { valueBytes } from '../io/bands.js';
import { readBands, readShape, type BandsRead } from '../parallel/read.js';
import { UsageError } from './errors.js';
import { checkOutput, isUrl, openArchive, statInput, trackTempDir, writeOutput, writeOutputWith } from './files.js';
import { num, seconds } from './format.js';
import { isNpyPath } from './input.js';
import { restoreMissing } from '../missing.js';
import { byPath, isNetcdfPath } from './names.js';
import { dimNames, notOneBox, type Region, type Span, rangesFrom, rangesWhere, readAxes, readSliceWindow, whereOption, type AxisRange, type WhereTerm } from './window.js';
import type { Archive, FloatArray } from '../index.js';
import type { NcWriteFile } from '../io/netcdf-write.js';
import { mkdtemp, readFile, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { printable } from '../format/schema.js';
import { ndShape } from '../geometry.js';
import { stat, statfs } from 'node:fs/promises';
import { dirname, join, resolve } from 'node:path';
import type { Context } from './context.js';
import { boundOption, endianOption, nameOption, threadsOption } from './options.js';
import { Output, type OutputFlags } from './output.js';
import { formatBound, isPointwise, resolveBound } from '../codec/bound.js';
import type { Bound } from '../types.js';
import type { FieldHeader } from '../format/schema.js';

interface UnpackFlags extends OutputFlags {
  output: string;
  netcdf4?: boolean;
  where?: WhereTerm[];
  field?: string;
  var?: string;
  /** --slices: one range (of the leading axes together), or one per leading axis. */
  slices?: Span[];
  region?: Region;
  bound?: Bound;
  endian?: 'little' | 'big';
  force?: boolean;
  threads?: number;
}

const HELP = `
IN is an archive file or an http(s) URL; a URL is read with HTTP Range
requests, fetching only the tail, header, index and the tiles needed.

--region R0:R1,C0:C1 decodes rows R0 to R1-1 and columns C0 to C1-1
(half-open ranges, counted from 0); an end left empty means the field's
edge, so ':100,50:' is the first 100 rows from column 50 on. Only the tiles
the window touches are read and decoded.

OUT ending in .nc gets a NetCDF classic file of every field (or --var NAME),
with dimensions and attributes restored (with --netcdf4 a NetCDF-4 file, the
only kind that holds variables of groups, named GROUP/NAME: each goes back
into its group); with --region, --slices or --where,
a window of one field, its dimensions and coordinate variables cut to match.
--where lat=-30:30,lon=100:180 chooses the window by coordinate values
(inclusive), through the coordinate variables the archive carries;
dimension names match in any case. --slices and --region count the axes of
the variable (slices over the leading ones, rows and columns the last two)
whatever its layout; OUT ending in / (an existing folder)
gets one NAME.npy per field; .csv writes a window as text (at most 10^6
values without --force). --slices A:B picks slices of an N-D field
(of its leading axes together: slice s of a (time, depth, lat, lon)
variable is time s / ndepth, depth s % ndepth); --slices A:B,C:D picks a
range of each leading axis (time A..B-1 and depth C..D-1), a box that .nc
output can always hold.

.npy, raw, CSV and folder outputs are decoded and written a band of tile
rows at a time, in bounded memory whatever the field's size; an output of
more than 64 MiB is announced with its size first, and one larger than the
free space of its file system is refused before anything is written.
NetCDF output and windows chosen by --where (or of a field stored as a
matrix) are made in memory, and refused beyond 512 MiB of values.

OUT ending in .npy gets a .npy file (little-endian, C order); any other name
gets headerless raw binary in C (row-major) order, little-endian unless
--endian big. The element type is the field's own (f32 or f64). Missing
values come back exactly as they were packed (NaN, infinities, fill value).

A tile whose payload fails its checksum or cannot be decoded stops unpack
with exit code 2 and no output; \`rankfield check\` lists every such tile.

Example:
  rankfield unpack https://example.org/sst.rfz -o box.npy --region 1000:1256,2000:2256`;

const END = /^[0-9]*$/;

/** `--region R0:R1,C0:C1`: two half-open ranges of non-negative integers, either end optional. */
/**
 * `--slices A:B` (a half-open range of slices, of the leading axes
 * together), or `A:B,C:D,...` (one range per leading axis); either end of
 * each may be left open.
 */
export function slicesOption(text: string): Span[] {
  return text.split(',').map((part) => {
    const r = part.split(':');
    if (r.length !== 2 || !r.every((e) => END.test(e.trim()))) throw new InvalidArgumentError(`slices must be A:B (slices A..B-1), or A:B,C:D,... (one range per leading axis); an empty end means the edge; got '${text}'`);
    const [a, b] = r.map((e) => (e.trim() === '' ? undefined : Number(e.trim())));
    for (const v of [a, b]) if (v !== undefined && !Number.isSafeInteger(v)) throw new InvalidArgumentError(`slice ends must be integers below 2^53, got '${text}'`);
    if (a !== undefined && b !== undefined && a >= b) throw new InvalidArgumentError(`slices ${a}:${b} are empty (the start must be below the end)`);
    return [a, b] as Span;
  });
}

/** Most values written to .csv without --force. */
export const CSV_LIMIT = 1_000_000;

/**
 * C-order values as CSV text, written as they come: a 2-D window as a
 * matrix (one line per row); more axes as a header of dimension names and
 * one line per value with its indexes. Values are given in order, whole
 * rows at a time; the text is encoded and handed to `put` a chunk of lines
 * at a time, so neither the text nor the values are ever whole in memory
 * and no single string grows past what the runtime allows (about 2^29
 * characters in V8), however many values are written.
 */
export class CsvWriter {
  private lines: string[] = [];
  private chars = 0;
  /** Values of a 2-D row not yet complete. */
  private row: string[] = [];
  private readonly encoder = new TextEncoder();
  /** The next value's indexes (more than 2 axes), else null. */
  private readonly idx: number[] | null;

  constructor(
    private readonly shape: readonly number[],
    dims: readonly string[],
    private readonly put: (bytes: Uint8Array) => void,
  ) {
    this.idx = shape.length === 2 ? null : new Array<number>(shape.length).fill(0);
    if (this.idx) this.line([...dims, 'value'].map((d) => (/[",\n]/.test(d) ? `"${d.replace(/"/g, '""')}"` : d)).join(','));
  }

  private line(text: string): void {
    this.lines.push(text);
    this.chars += text.length + 1;
    if (this.chars >= CSV_CHUNK) this.flush();
  }

  private flush(): void {
    if (this.lines.length > 0) this.put(this.encoder.encode(this.lines.join('\n') + '\n'));
    this.lines = [];
    this.chars = 0;
  }

  /** The next values in C order (whole rows, or a row in pieces). */
  write(values: Float32Array | Float64Array): void {
    const idx = this.idx;
    if (idx === null) {
      const c = this.shape[1];
      let i = 0;
      // A row begun by earlier values is finished first; then whole rows; then the start of the next.
      if (this.row.length > 0) {
        const k = Math.min(values.length, c - this.row.length);
        for (; i < k; i++) this.row.push(String(values[i]));
        if (this.row.length === c) {
          this.line(this.row.join(','));
          this.row = [];
        }
      }
      for (; i + c <= values.length; i += c) this.line(Array.from(values.subarray(i, i + c), (x) => String(x)).join(','));
      for (; i < values.length; i++) this.row.push(String(values[i]));
      return;
    }
    const shape = this.shape;
    for (let k = 0; k < values.length; k++) {
      this.line(`${idx.join(',')},${String(values[k])}`);
      for (let a = shape.length - 1; a >= 0 && ++idx[a] === shape[a]; a--) idx[a] = 0;
    }
  }

  /** Write out what is left. */
  end(): void {
    this.flush();
  }
}

/** C-order values as CSV (see {@link CsvWriter}), in memory: for small windows and tests. */
export function formatCsv(values: Float32Array | Float64Array, shape: number[], dims: string[]): Uint8Array {
  const chunks: Uint8Array[] = [];
  const w = new CsvWriter(shape, dims, (b) => chunks.push(b));
  w.write(values);
  w.end();
  const out = new Uint8Array(chunks.reduce((n, b) => n + b.length, 0));
  let at = 0;
  for (const b of chunks) {
    out.set(b, at);
    at += b.length;
  }
  return out;
}

/** Characters of CSV text encoded at once. */
const CSV_CHUNK = 1 << 20;

/** Outputs larger than this (bytes) are announced, with their size, before anything is written. */
export const ANNOUNCE_BYTES = 1 << 26;

/**
 * Most bytes of decoded values an output held in memory may take (NetCDF
 * output, and windows chosen by axis): beyond it such a run is refused, with
 * the ways round it, rather than left to run out of memory. .npy, raw and
 * CSV outputs of a field or a --region / --slices window are written band by
 * band and have no such limit.
 */
export const HELD_BYTES = 1 << 29;

/** Refuse an output that would hold more than {@link HELD_BYTES} of decoded values in memory. */
function checkHeld(bytes: number, what: string, out: string): void {
  if (bytes <= HELD_BYTES) return;
  throw new UsageError(`'${out}' would hold ${what} in memory, ${bytes} bytes of values, more than the ${HELD_BYTES} this output allows; write .npy or raw (band by band, any size), or a smaller window`);
}

/** Bytes of the decoded values of whole fields. */
function fieldBytes(archive: Archive, names: string[]): number {
  let b = 0;
  for (const name of names) {
    const h = archive.field(name).header;
    b += (h.slices ?? 1) * h.shape[0] * h.shape[1] * (h.dtype === 'f32' ? 4 : 8);
  }
  return b;
}

/**
 * Before writing `bytes` to `out`: say how many when they are many (a small
 * archive may decode to a huge field), and refuse when the file system
 * holding `out` has fewer bytes free, so a run never ends half-way with the
 * disk full.
 */
async function beforeWriting(out: string, bytes: number, what: string, note: (s: string) => void): Promise<void> {
  const fs = await statfs(dirname(resolve(out))).catch(() => null);
  const free = fs === null ? Infinity : fs.bavail * fs.bsize;
  if (bytes > free) throw new UsageError(`'${out}' would take ${bytes} bytes (${what}) but its file system has ${free} bytes free; choose a window with --region / --slices, or another place`);
  if (bytes > ANNOUNCE_BYTES) note(`writing ${bytes} bytes (${what}) to '${out}'`);
}

export function regionOption(text: string): Region {
  const parts = text.split(',');
  const ranges = parts.map((p) => p.trim().split(':'));
  if (parts.length !== 2 || ranges.some((r) => r.length !== 2 || !r.every((e) => END.test(e.trim())))) {
    throw new InvalidArgumentError(`region must be R0:R1,C0:C1 (rows R0..R1-1, columns C0..C1-1; an empty end means the edge), got '${text}'`);
  }
  const [rows, cols] = ranges.map((r) => r.map((e) => (e.trim() === '' ? undefined : Number(e.trim()))) as [number | undefined, number | undefined]);
  for (const v of [...rows, ...cols]) {
    if (v !== undefined && !Number.isSafeInteger(v)) throw new InvalidArgumentError(`region ends must be integers below 2^53, got '${text}'`);
  }
  for (const [what, [a, b]] of [['rows', rows], ['columns', cols]] as const) {
    if (a !== undefined && b !== undefined && a >= b) throw new InvalidArgumentError(`region ${what} ${a}:${b} are empty (the start must be below the end), in '${text}'`);
  }
  return { rows, cols };
}

/** Register `unpack` on the program. */
export function registerUnpack(program: Command, ctx: Context): void {
  program
    .command('unpack')
    .summary('decode a field of an archive (or a window of it) to .npy or raw binary')
    .description('Decode one field of an archive (by default the first), or a window of it, to a .npy or raw file.')
    .argument('<IN>', 'archive to read: a file or an http(s) URL')
    .requiredOption('-o, --output <OUT>', 'file to write: OUT.npy, OUT.csv, OUT.nc (NetCDF classic, every field or --var), DIR/ (one .npy per field), or raw binary (e.g. OUT.raw)')
    .option('--field <NAME>', 'field to decode (default: the first)', nameOption)
    .option('--var <NAME>', 'the same as --field (a NetCDF variable packed as a field)', nameOption)
    .option('--slices <A:B>', 'fields of slices: decode only slices A..B-1 of the leading axes together, or A:B,C:D,... one range per leading axis (with --region for a window of each)', slicesOption)
    .option('--region <R0:R1,C0:C1>', 'decode only rows R0..R1-1 and columns C0..C1-1 (an empty end means the edge)', regionOption)
    .option('--where <NAME=LO:HI,...>', 'decode only where the coordinate variables of the named dimensions lie within LO..HI (inclusive; an empty end is open), e.g. lat=-30:30,lon=100:180; names in any case', whereOption)
    .option('--bound <MODE:VALUE>', 'a looser bound than the archive holds: read only as much of each tile as meets it (prints what the values satisfy)', boundOption)
    .option('--netcdf4', 'NetCDF output: write NetCDF-4 (HDF5 inside, through h5wasm) instead of NetCDF classic')
    .option('--endian <ORDER>', 'raw output: byte order, little (default) or big', endianOption)
    .option('--threads <N>', 'threads decoding bands of tiles for .npy and raw output (default: the number of cores; N - 1 worker threads beside the main one)', threadsOption)
    .option('--force', 'overwrite OUT if it exists')
    .addHelpText('after', HELP)
    .action(async (input: string, flags: UnpackFlags) => {
      const start = performance.now();
      const out = new Output(ctx, flags);
      const to = outputKind(flags);
      if (!isUrl(input)) await statInput(input);
      const io = { force: flags.force === true, inputs: isUrl(input) ? [] : [input] };
      if (to.dirOut) await checkFolder(flags.output);
      else await checkOutput(flags.output, io);
      const archive = await openArchive(input);
      const job: UnpackJob = { archive, input, flags, io, start, out, ...to };
      try {
        const chosen = byPath(archive.names, flags.var ?? flags.field);
        const windowed = flags.where !== undefined || flags.region !== undefined || flags.slices !== undefined;
        if (!to.dirOut && windowed) {
          if (to.nc && chosen === undefined && archive.mainNames.length > 1) throw new UsageError(`a window written to .nc is of one field: name it with --var (fields: ${archive.mainNames.map((n) => printable(n)).join(', ')})`);
          const h = archive.field(chosen).header;
          if (to.nc || flags.where !== undefined || h.layout?.startsWith('matrix:') || (flags.slices !== undefined && flags.slices.length > 1)) {
            await unpackAxes(archive, h, flags, { input, nc: to.nc, csv: to.csv, npy: to.npy, io, start }, out);
            return;
          }
        }
        if (to.dirOut) await unpackFolder(job);
        else if (to.nc) await unpackNetcdf(job, chosen);
        else await unpackStream(job, chosen);
      } finally {
        await archive.close();
      }
    });
}

/** What -o names: .npy, NetCDF, CSV, a folder, or else raw binary. */
interface OutputKind {
  npy: boolean;
  nc: boolean;
  csv: boolean;
  dirOut: boolean;
}

/** One run of `unpack`: the open archive, the command line, and where it reports. */
interface UnpackJob extends OutputKind {
  archive: Archive;
  input: string;
  flags: UnpackFlags;
  io: { force: boolean; inputs: string[] };
  start: number;
  out: Output;
}

/** The kind of output -o names, with the flags that do not go with it refused. */
function outputKind(flags: UnpackFlags): OutputKind {
  if (flags.var !== undefined && flags.field !== undefined) throw new UsageError('give --var or --field, not both');
  const given = flags.var ?? flags.field;
  const npy = isNpyPath(flags.output);
  const nc = isNetcdfPath(flags.output);
  const csv = /\.csv$/i.test(flags.output);
  const dirOut = flags.output.endsWith('/');
  if (flags.endian !== undefined && (npy || nc || csv || dirOut)) throw new UsageError(`--endian applies to raw output; '${flags.output}' is not written as raw binary`);
  if (dirOut && given !== undefined) throw new UsageError(`-o ${flags.output} (a folder) writes every field; with --var, name a file such as OUT.npy`);
  if (dirOut && (flags.region || flags.slices || flags.bound || flags.where)) throw new UsageError(`--region, --slices, --where and --bound apply to one field; '${flags.output}' (a folder) gets whole fields`);
  if (flags.netcdf4 && !nc) throw new UsageError(`--netcdf4 applies to NetCDF output (OUT ending in .nc); '${flags.output}' is not`);
  if (nc && flags.bound) throw new UsageError(`--bound applies to .npy, .csv or raw output; '${flags.output}' (NetCDF) gets the values as stored`);
  if (flags.where && (flags.region || flags.slices)) throw new UsageError('--where chooses the window by coordinate values; give it without --region and --slices');
  return { npy, nc, csv, dirOut };
}

/** One .npy per field in the folder -o names (the factor fields of layers are part of their field), each decoded band by band and written as it comes. */
async function unpackFolder({ archive, input, flags, io, start, out }: UnpackJob): Promise<void> {
  const names = archive.mainNames;
  const files = fileNames(names);
  const written: { path: string; bytes: number; fields: string[] }[] = [];
  try {
    for (const [i, name] of names.entries()) {
      const h = archive.field(name).header;
      const path = join(flags.output, files[i]);
      const { shape } = readShape(archive, name, {});
      const head = npyHeader(shape, h.dtype);
      const bytes = head.length + shape.reduce((a, b) => a * b, 1) * (h.dtype === 'f32' ? 4 : 8);
      await beforeWriting(path, bytes, `${shape.join('x')} ${h.dtype}`, (t) => out.note(t));
      await writeOutputWith(path, io, async (sink) => {
        sink.write(head);
        // Each band is written while the next is decoded (later(): the band's own buffer, not a copy).
        await readBands(archive, name, { threads: flags.threads, location: input }, (values) => {
          restoreMissing(h, values);
          return sink.later(valueBytes(values, 'little'));
        });
      });
      written.push({ path, bytes, fields: [name] });
    }
  } catch (e) {
    // As for one file: a failed run leaves no output, not the fields before the failure.
    for (const w of written) await rm(w.path, { force: true });
    throw e;
  }
  out.text(`unpacked ${names.length} field${names.length === 1 ? '' : 's'} from '${input}' -> ${files.map((f) => `'${join(flags.output, f)}'`).join(', ')}; ${seconds(performance.now() - start)}\n`);
  out.result({ command: 'unpack', input, output: flags.output, format: 'npy', files: written, seconds: (performance.now() - start) / 1000 });
}

/**
 * Every field (but the factor fields of layers, part of their field), or the one chosen, to a NetCDF file:
 * written from fields in memory, so refused beyond HELD_BYTES rather than running out of memory.
 */
async function unpackNetcdf({ archive, input, flags, io, start, out }: UnpackJob, chosen: string | undefined): Promise<void> {
  const names = chosen !== undefined ? [archive.field(chosen).header.name] : archive.mainNames;
  checkHeld(fieldBytes(archive, names), `${names.length} field${names.length === 1 ? '' : 's'} whole (NetCDF is written from memory)`, flags.output);
  const fields = [];
  for (const name of names) {
    const f = await archive.read(name);
    fields.push({ h: archive.field(name).header, shape: f.shape, values: f.values });
  }
  const { netcdfFromFields } = await netcdfCode();
  const bytes = await netcdfBytes(netcdfFromFields(archive.header.attrs, fields), flags.netcdf4 === true);
  await writeOutput(flags.output, bytes, io);
  const format = flags.netcdf4 ? 'NetCDF-4' : 'NetCDF classic';
  out.text(`unpacked ${fields.length} field${fields.length === 1 ? '' : 's'} from '${input}' -> '${flags.output}' (${format}, ${bytes.length} bytes); ${seconds(performance.now() - start)}\n`);
  out.result({ command: 'unpack', input, output: flags.output, format: flags.netcdf4 ? 'netcdf4' : 'netcdf', files: [{ path: flags.output, bytes: bytes.length, fields: names }], seconds: (performance.now() - start) / 1000 });
}

/** One field, or a window of it, to .npy, CSV or raw binary: decoded band by band (on worker threads) and written as each band comes, so the field is never whole in memory. */
async function unpackStream(job: UnpackJob, chosen: string | undefined): Promise<void> {
  const { archive, input, flags, io, out, npy, csv } = job;
  const { header: h, summary } = archive.field(chosen);
  if (flags.bound) refuseStricter(flags.bound, h, summary, input);
  const r = flags.region;
  const window = r && {
    rows: [r.rows[0] ?? 0, r.rows[1] ?? h.shape[0]] as [number, number],
    cols: [r.cols[0] ?? 0, r.cols[1] ?? h.shape[1]] as [number, number],
  };
  const sl = flags.slices && { slices: [flags.slices[0][0] ?? 0, flags.slices[0][1] ?? h.slices ?? 1] as [number, number] };
  if (csv) {
    const s = sl ? sl.slices[1] - sl.slices[0] : h.slices ?? 1;
    const cells = s * (window ? (window.rows[1] - window.rows[0]) * (window.cols[1] - window.cols[0]) : h.shape[0] * h.shape[1]);
    if (cells > CSV_LIMIT && flags.force !== true) throw new UsageError(`.csv output of ${cells} values is refused (more than ${CSV_LIMIT}); choose a smaller window with --region / --slices, write .npy, or use --force`);
  }
  const request = { ...(window ?? {}), ...(sl ?? {}), ...(flags.bound ? { bound: flags.bound } : {}) };
  const endian = flags.endian ?? 'little';
  let written = 0;
  const { shape } = readShape(archive, h.name, request);
  const cells = shape.reduce((a, b) => a * b, 1);
  const item = h.dtype === 'f32' ? 4 : 8;
  if (!csv) await beforeWriting(flags.output, (npy ? npyHeader(shape, h.dtype).length : 0) + cells * item, `${shape.join('x')} ${h.dtype}`, (t) => out.note(t));
  let got: BandsRead | undefined;
  const tiles = tilesTouched(h, request);
  const bar = out.progress(`unpacking '${printable(h.name)}'`, tiles, cells * item);
  let done = 0;
  try {
    await writeOutputWith(flags.output, io, async (sink) => {
      const put = (b: Uint8Array) => {
        sink.write(b);
        written += b.length;
      };
      const dims = h.dims && h.dims.length === shape.length ? h.dims : shape.length === 3 ? ['slice', 'row', 'col'] : shape.map((_, i) => `axis${i}`);
      const text = csv ? new CsvWriter(shape, dims, put) : null;
      if (npy) put(npyHeader(shape, h.dtype));
      // .npy and raw: each band is written while the next is decoded (later(): the band's own buffer, or
      // its byte-swapped copy, handed over as is).
      got = await readBands(archive, h.name, { ...request, threads: flags.threads, location: input }, (values) => {
        restoreMissing(h, values);
        done += values.length;
        bar.update(Math.round((tiles * done) / cells));
        if (text) text.write(values);
        else {
          const bytes = valueBytes(values, endian);
          written += bytes.length;
          return sink.later(bytes);
        }
      });
      text?.end();
    });
  } finally {
    bar.stop();
  }
  reportStream(job, h, got!, { written, windowed: Boolean(window || sl), sliced: Boolean(sl), endian });
}

/** What `unpack` of one field to .npy, CSV or raw prints and returns. */
function reportStream({ input, flags, start, out, npy, csv }: UnpackJob, h: FieldHeader, field: BandsRead, run: { written: number; windowed: boolean; sliced: boolean; endian: 'little' | 'big' }): void {
  const { written, endian } = run;
  const kind = npy ? '.npy' : csv ? 'CSV' : `raw ${endian}-endian`;
  const [[r0, r1], [c0, c1]] = [field.window.rows, field.window.cols];
  const [s0, s1] = field.window.slices ?? [0, 1];
  const full = `field '${printable(h.name)}' (${(h.nd_shape ?? h.shape).join('x')} ${h.dtype})`;
  const part = `${run.sliced ? `slices ${s0}..${s1 - 1}, ` : ''}rows ${r0}..${r1 - 1}, columns ${c0}..${c1 - 1} (${field.shape.join('x')}) of `;
  out.text(`unpacked ${run.windowed ? part : ''}${full} from '${input}' -> '${flags.output}' (${kind}, ${written} bytes); ${seconds(performance.now() - start)}\n`);
  out.result({
    command: 'unpack',
    input,
    output: flags.output,
    format: npy ? 'npy' : csv ? 'csv' : 'raw',
    files: [{ path: flags.output, bytes: written, fields: [h.name] }],
    field: h.name,
    shape: field.shape,
    window: field.window,
    ...(flags.bound ? { bound: formatBound(flags.bound), prefixTiles: field.prefixTiles, achieved: field.achieved } : {}),
    seconds: (performance.now() - start) / 1000,
  });
  if (flags.bound) {
    const a = field.achieved;
    out.text(`requested ${formatBound(flags.bound)}: ${field.prefixTiles} of the tiles read as factors only; the values satisfy max error ${a.maxErr.toPrecision(4)}, RMSE ${a.rmse.toPrecision(4)} (recorded at encode time)\n`);
  }
}

/** Tiles a read of `request` touches (for the progress bar). */
function tilesTouched(h: FieldHeader, request: { slices?: [number, number]; rows?: [number, number]; cols?: [number, number] }): number {
  const [s0, s1] = request.slices ?? [0, h.slices ?? 1];
  const [r0, r1] = request.rows ?? [0, h.shape[0]];
  const [c0, c1] = request.cols ?? [0, h.shape[1]];
  const span = (a: number, b: number, t: number) => Math.floor((b - 1) / t) - Math.floor(a / t) + 1;
  return (s1 - s0) * span(r0, r1, h.tile[0]) * span(c0, c1, h.tile[1]);
}

/** The NetCDF side of the command line, loaded only by the runs that write NetCDF or read coordinate variables. */
const netcdfCode = () => import('./netcdf.js');

/**
 * The bytes of a NetCDF file: classic (or 64-bit offset when the sizes need
 * it), or NetCDF-4 written by h5wasm into a temporary folder (removed
 * afterwards, and on an interrupt) and read back.
 */
async function netcdfBytes(file: NcWriteFile, netcdf4: boolean): Promise<Uint8Array> {
  if (!netcdf4 && file.groupPaths) {
    const grouped = [...file.variables.map((v) => v.name), ...file.dims.map((d) => d.name), ...Object.keys(file.globalAttrs)].filter((n) => n.includes('/'));
    throw new UsageError(`the output holds variables, dimensions or attributes of NetCDF-4 groups (${grouped.slice(0, 3).map(printable).join(', ')}${grouped.length > 3 ? ', ...' : ''}), which NetCDF classic cannot hold: add --netcdf4, or write .npy`);
  }
  if (!netcdf4) return (await import('../io/netcdf-write.js')).writeNetcdf(file);
  const dir = await mkdtemp(join(tmpdir(), 'rankfield-nc4-'));
  trackTempDir(dir, true);
  try {
    const path = join(dir, 'out.nc');
    await (await import('../io/hdf5-write.js')).writeNetcdf4(path, file);
    return new Uint8Array(await readFile(path));
  } finally {
    await rm(dir, { recursive: true, force: true });
    trackTempDir(dir, false);
  }
}

/**
 * `unpack` of a window chosen by axis: by --where coordinate ranges, to
 * NetCDF (dimensions and coordinate variables cut to match), or of a field
 * laid out as a matrix (--slices and --region count its own axes, as for
 * slices). The window is read into memory, then written.
 */
async function unpackAxes(
  archive: Archive,
  h: FieldHeader,
  flags: UnpackFlags,
  o: { input: string; nc: boolean; csv: boolean; npy: boolean; io: { force: boolean; inputs: string[] }; start: number },
  out: Output,
): Promise<void> {
  const nd = ndShape(h);
  const { carriedValues, netcdfFromFields } = await netcdfCode();
  let ranges: AxisRange[] | null;
  if (flags.where) {
    ranges = rangesWhere(h, flags.where, (dim) => {
      const v = carriedValues(archive.header.attrs, dim);
      return v === null || v instanceof Uint8Array || (Array.isArray(v) && v.some((x) => typeof x !== 'number')) ? null : (v as ArrayLike<number>);
    });
  } else ranges = rangesFrom(h, flags.slices, flags.region);
  let got: { values: FloatArray; shape: number[] };
  const cells = (r: AxisRange[]) => r.reduce((x, [a, b]) => x * (b - a), 1);
  const k = nd.length;
  const sliceRange = (): AxisRange => [flags.slices?.[0][0] ?? 0, flags.slices?.[0][1] ?? nd.slice(0, k - 2).reduce((x, y) => x * y, 1)];
  const rowRange: AxisRange = [flags.region?.rows[0] ?? 0, flags.region?.rows[1] ?? nd[k - 2]];
  const colRange: AxisRange = [flags.region?.cols[0] ?? 0, flags.region?.cols[1] ?? nd[k - 1]];
  const n = ranges ? cells(ranges) : cells([sliceRange(), rowRange, colRange]);
  if (o.csv && n > CSV_LIMIT && flags.force !== true) throw new UsageError(`.csv output of ${n} values is refused (more than ${CSV_LIMIT}); choose a smaller window, write .npy, or use --force`);
  checkHeld(n * (h.dtype === 'f32' ? 4 : 8), `a window of ${n} values (a window by axis is read whole)`, flags.output);
  if (ranges) got = await readAxes(archive, h, ranges);
  else if (o.nc) throw new UsageError(notOneBox(h, sliceRange()));
  else got = await readSliceWindow(archive, h, sliceRange(), rowRange, colRange);
  const dims = dimNames(h);
  let bytes: Uint8Array;
  let kind: string;
  if (o.nc) {
    const cut = new Map<string, [number, number]>();
    ranges!.forEach(([a, b], i) => {
      if (a !== 0 || b !== nd[i]) cut.set(dims[i], [a, b]);
    });
    bytes = await netcdfBytes(netcdfFromFields(archive.header.attrs, [{ h, shape: got.shape, values: got.values }], cut), flags.netcdf4 === true);
    kind = flags.netcdf4 ? 'NetCDF-4' : 'NetCDF classic';
  } else {
    restoreMissing(h, got.values);
    if (o.npy) {
      bytes = formatNpy({ data: got.values, shape: got.shape, dtype: h.dtype });
      kind = '.npy';
    } else if (o.csv) {
      bytes = formatCsv(got.values, got.shape, ranges ? dims : got.shape.length === 3 ? ['slice', dims[k - 2], dims[k - 1]] : dims);
      kind = 'CSV';
    } else {
      bytes = valueBytes(got.values, flags.endian ?? 'little');
      kind = `raw ${flags.endian ?? 'little'}-endian`;
    }
  }
  await writeOutput(flags.output, bytes, o.io);
  const what = ranges ? ranges.map(([a, b], i) => `${printable(dims[i])} ${a}..${b - 1}`).join(', ') : `slices ${sliceRange()[0]}..${sliceRange()[1] - 1}, rows ${rowRange[0]}..${rowRange[1] - 1}, columns ${colRange[0]}..${colRange[1] - 1}`;
  out.text(`unpacked ${what} (${got.shape.join('x')}) of field '${printable(h.name)}' (${nd.join('x')} ${h.dtype}) from '${o.input}' -> '${flags.output}' (${kind}, ${bytes.length} bytes); ${seconds(performance.now() - o.start)}\n`);
  out.result({
    command: 'unpack',
    input: o.input,
    output: flags.output,
    format: o.nc ? (flags.netcdf4 ? 'netcdf4' : 'netcdf') : o.npy ? 'npy' : o.csv ? 'csv' : 'raw',
    files: [{ path: flags.output, bytes: bytes.length, fields: [h.name] }],
    field: h.name,
    shape: got.shape,
    // A window by axis: each dimension's half-open range; else slices (of the leading axes together), rows and columns.
    window: ranges ? null : { slices: sliceRange(), rows: rowRange, cols: colRange },
    axes: ranges ? ranges.map(([a, b], i) => ({ name: dims[i], range: [a, b] })) : null,
    seconds: (performance.now() - o.start) / 1000,
  });
}

/**
 * Refuse `unpack --bound` when the request is stricter than the archive
 * holds: a read can only give back what was stored. A pointwise request is
 * met when the archive's own bound is pointwise and no looser, or when its
 * recorded max error is within it; an RMSE request likewise with the RMSE
 * (a pointwise bound E also bounds the RMSE by E).
 */
export function refuseStricter(b: Bound, h: FieldHeader, summary: { max_err: number; rmse: number }, input: string): void {
  const range = h.bound.range;
  const tol = resolveBound(b, range ? range[1] - range[0] : 0);
  const pointwise = isPointwise(b.mode);
  const heldBy = pointwise ? isPointwise(h.bound.mode) : true;
  const met = (heldBy && h.bound.tolerance <= tol) || (pointwise ? summary.max_err : summary.rmse) <= tol;
  if (met) return;
  throw new UsageError(
    `--bound ${formatBound(b)} (${pointwise ? 'max error' : 'RMSE'} ${num(tol)}) is stricter than field '${printable(h.name)}' of '${input}' holds: ` +
      `it was packed under ${formatBound(h.bound)}, recorded max error ${num(summary.max_err)}, RMSE ${num(summary.rmse)}; leave out --bound to read the values as stored`,
  );
}

/** Refuse a folder output that does not exist or is not a folder. */
async function checkFolder(path: string): Promise<void> {
  const st = await stat(path).catch(() => null);
  if (st === null || !st.isDirectory()) throw new UsageError(`output folder '${path}' does not exist (create it first)`);
}

/** One safe, distinct file name per field: NAME.npy, other characters as '_'. */
function fileNames(names: string[]): string[] {
  const used = new Set<string>();
  return names.map((n) => {
    const base = n.replace(/[^A-Za-z0-9._-]/g, '_').replace(/^\.+/, '_').slice(0, 200) || 'field';
    let name = `${base}.npy`;
    for (let k = 2; used.has(name.toLowerCase()); k++) name = `${base}-${k}.npy`;
    used.add(name.toLowerCase());
    return name;
  });
}

