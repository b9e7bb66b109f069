/** `rankfield pack`: compress a field (2-D or N-D), or the variables of a NetCDF file, into an archive. */
import { basename, extname } from 'node:path';
import type { Command } from 'commander';
import { ArchiveBuilder, InputCode, InputError, type Bound, type Dtype, type FloatArray } from '../index.js';
import { fileError, UsageError } from './errors.js';
import { fieldBands, KEY, netcdfFields, parseMatrix, type NcField } from './netcdf.js';
import { openNetcdfInput } from './netcdf-open.js';
import { NC_TYPE_SIZE, type NcType } from '../io/netcdf-types.js';
import { bytesText, errorVsBound, boundText, num, ratio, rawBytes, seconds } from './format.js';
import { checkOutput, openArchive, statInput, writeOutputWith } from './files.js';
import { checkLayout, inputKind, openFieldBands, type InputKind } from './input.js';
import { packPlannedCli, partOption, type PackFlags } from './pack-plan.js';
import type { BandReader } from '../io/bands.js';
import type { Context } from './context.js';
import { printable } from '../format/schema.js';
import { Output } from './output.js';
import { layerText, packChoices, packDetails, writtenFacts } from './pack-report.js';
import { RangeWatch, suspectMessage } from './fill-guard.js';
import { boundOption, defaultThreads, dtypeOption, endianOption, fillOption, layerOption, nameOption, ndShapeOption, threadsOption, tileOption } from './options.js';

// cli/plan.ts takes it from here.


/** The note every user sees before deciding to pack: lossy, keep originals, retention rules. */
export const LOSSY_NOTE = `
Packing is LOSSY. It discards information: the archive holds values within the
stated bound of the originals, not the originals, and what is discarded cannot
be recovered. Keep the original files until

    rankfield check OUT.rfz --against IN

passes, and follow your institution's data-retention rules before deleting any
original.`;

const BOUNDS_HELP = `
Bounds (MODE:VALUE):
  abs:E     every value within E of the original
  rel:R     every value within R x (max - min) of the field's valid values
  rmse:E    root-mean-square error at most E
  psnr:D    PSNR at least D dB, i.e. RMSE at most (max - min) / 10^(D/20)
Missing values (NaN, infinities, and the --fill value) are kept bit for bit
and are not counted in the bound.

Fill-value guard: a value that looks like an undeclared fill value would set
the field's range, and with it what rel and psnr bounds allow. pack refuses
(exit 2, naming the value and its count) when a value of magnitude 1e30 or
more occurs, or when one value at an end of the range holds at least 0.1% of
the cells and lies more than 10 times the spread of the other values beyond
them. Give --fill V if it marks missing cells, --no-fill to pack it as data.

Input, told apart by its first bytes (else by its name): a .npy file holding
a float32 or float64 array of 2 or more axes (C or Fortran order; N-D in
Fortran order is read whole, up to 2 GiB); a NetCDF classic or 64-bit-offset
file, whatever its name (.nc, .cdf, ...); a NetCDF-4 or HDF5 file (read
through h5wasm by hyperslabs; variables of groups named by their path, GROUP/NAME, and
--var /GROUP/NAME chooses one);
anything else is read as headerless raw binary and needs --shape (RxC, or
AxBxC... for N-D in C order) and --dtype (--endian defaults to little). An
array of 3 or more axes is packed as 2-D slices over its last two axes, or
as a matrix with --matrix (see below).

NetCDF input: every numeric variable of 2 or more dimensions becomes one field
(or those named by --var, repeatable), with its attributes and dimension
names; global attributes become the archive's. The other variables (1-D
coordinates, char variables such as station names, scalars) are not
compressed: they are carried losslessly, bit for bit, in the archive's
attributes (up to 1 MiB of JSON each), and unpack -o OUT.nc writes them back. CF _FillValue / missing_value
cells are kept bit for bit and excluded from the bound, each coming back as
itself; variables packed with scale_factor / add_offset are stored as their
unpacked physical values, and the bound applies to those. unpack -o OUT.nc
writes each variable back in its stored type with its own attributes: a
value stored as an integer is rounded to the nearest stored step, which adds
at most half a step (scale_factor / 2) to the error; under a pointwise bound
below half a step the stored integers come back exactly. A variable of 3 or more dimensions is stored either
as a stack of 2-D slices over its last two axes, or as a matrix whose rows
are its leading axes and whose columns are the rest (time x grid point: the
snapshot matrix, where series of snapshots are most often of low rank); by
default the layout whose sample packs smallest is kept (show names it).
--layout slices forces slices; --matrix time:space forces the matrix, with
the leading axes named before the colon as rows.

Example:
  rankfield pack sst.npy -o sst.rfz --bound abs:0.01 --fill -999
  rankfield pack run.nc -o run.rfz --bound rel:1e-3 --matrix time:space`;


/** Default field name: the input file name without its extension. */
export function defaultName(input: string): string {
  const base = basename(input, extname(input));
  return base.length > 0 && base.length <= 1024 ? base : 'field';
}

/** Refuse a fill value the field's element type cannot hold. */
export function checkFill(fill: number | undefined, dtype: Dtype): void {
  if (fill !== undefined && dtype === 'f32' && !Number.isFinite(Math.fround(fill))) {
    throw new InputError(InputCode.Option, `fill value ${fill} is outside the float32 range of the input`);
  }
}

function countFill(values: FloatArray, fill: number): number {
  const f = values instanceof Float32Array ? Math.fround(fill) : fill;
  let n = 0;
  for (let i = 0; i < values.length; i++) if (values[i] === f) n++;
  return n;
}

/** Register `pack` on the program. */
export function registerPack(program: Command, ctx: Context): void {
  program
    .command('pack')
    .summary('compress a field (2-D or N-D) or NetCDF variables into an archive (lossy: see pack --help)')
    .description('Compress a field (2-D or N-D), or the variables of a NetCDF file, into an archive, keeping every value within a stated error bound.\n' + LOSSY_NOTE)
    .argument('<IN>', 'input: .npy (float32/float64, 2 or more axes), NetCDF, or raw binary with --shape and --dtype')
    .requiredOption('-o, --output <OUT>', 'archive to write (conventionally ending in .rfz)')
    .option('--bound <MODE:VALUE>', 'error bound: abs:E, rel:R, rmse:E or psnr:D (required, unless --plan gives it)', boundOption)
    .option('--tile <RxC>', 'tile size: RxC, one number for square tiles, or auto (default: 64, 128, 256, also 512 on fields of at least 1024 x 1024 and 1024 on fields of at least 2048 x 2048, and the whole field when small, each tried on tiles spread over the field, the smallest kept)', tileOption)
    .option('--fill <V>', 'fill value marking missing cells (restored bit for bit, excluded from the bound); NetCDF input: for variables without _FillValue / missing_value', fillOption)
    .option('--no-fill', 'pack extreme values as data: turn off the refusal of a value that looks like an undeclared fill value (see below)')
    .option('--name <NAME>', 'field name stored in the archive (default: IN without its extension)', nameOption)
    .option('--shape <RxC>', 'raw input: rows x columns, or AxBxC... for an N-D array in C order', ndShapeOption)
    .option('--dtype <TYPE>', 'raw input: f32 or f64', dtypeOption)
    .option('--endian <ORDER>', 'raw input: byte order, little (default) or big', endianOption)
    .option('--var <NAME>', 'NetCDF input: a variable to pack (repeatable; default every numeric variable of 2+ dimensions)', (v: string, prev: string[] | undefined) => [...(prev ?? []), v])
    .option('--matrix <AXES:NAME>', 'variables or arrays of 3+ axes: flatten the leading axes AXES (comma-separated; axis0, axis1, ... for .npy and raw) into rows, the rest into columns, e.g. time:space', parseMatrix)
    .option('--layout <LAYOUT>', 'variables of 3+ dimensions: auto (default: NetCDF, the layout whose sample packs smallest; .npy and raw, slices) or slices', layoutOption)
    .option('--threads <N>', 'threads encoding tiles (default: the number of cores, and 1 for a --part; N - 1 worker threads beside the main one); the archive is the same for every N', threadsOption)
    .option('--progressive', 'lay each tile\'s factors out in rank groups with their recorded errors, so that `unpack --bound` with a looser bound reads only a prefix of each tile (costs some bytes)')
    .option('--layer <auto|off|K>', 'a field layer: a truncated SVD of the whole field (rank K, or auto: ranks 1, 2, 4, 8 or none, the smallest on a sample) stored in pieces along tile rows and columns, under each tile\'s own coding; pays on fields of low rank as a whole packed with small tiles (default off; older readers refuse archives with a layer)', layerOption)
    .option('--plan <PLAN>', 'pack with the field-wide choices of a plan written by `rankfield plan` (bound, tile, fill, name come from it)')
    .option('--part <K/N>', 'with --plan: pack only part K of N (a band of rows; see plan --help), to be joined by `rankfield join`', partOption)
    .option('--force', 'overwrite OUT if it exists')
    .addHelpText('after', BOUNDS_HELP)
    .action(async (input: string, flags: PackFlags) => {
      const start = performance.now();
      const out = new Output(ctx, flags);
      await statInput(input);
      const kind = await inputKind(input);
      if (flags.plan !== undefined || flags.part !== undefined) return packPlannedCli(input, kind, flags, out, start);
      const bound = flags.bound;
      if (bound === undefined) throw new UsageError("required option '--bound <MODE:VALUE>' not specified (a plan from 'rankfield plan', given with --plan PLAN, holds it instead)");
      if (kind === 'netcdf' || kind === 'hdf5') return packNetcdf(input, { ...flags, bound }, out, start, kind === 'hdf5');
      return packArray(input, kind, { ...flags, bound }, out, start);
    });
}

/** A .npy or raw array packed band by band: the input is read a band of tile rows at a time and payloads are written as they are finished, so memory holds about one band of tiles plus the index, whatever the size. */
async function packArray(input: string, kind: InputKind, flags: PackFlags & { bound: Bound }, out: Output, start: number): Promise<void> {
  const bound = flags.bound;
  if (flags.var !== undefined) throw new UsageError(`--var applies to NetCDF input; '${input}' is not NetCDF (by its first bytes or its name)`);
  const layout = { shape: flags.shape, dtype: flags.dtype, endian: flags.endian };
  checkLayout(input, layout, undefined, kind);
  const io = { force: flags.force === true, inputs: [input] };
  await checkOutput(flags.output, io);
  // The encoder uses each band before it asks for the next (BandSource), so one buffer serves them all.
  const field = await openFieldBands(input, layout, kind, undefined, { reuse: true });
  let grid: ArrayGrid;
  try {
    grid = arrayGrid(field.ndShape, flags.matrix, flags.layout, input);
  } catch (e) {
    field.close();
    throw e;
  }
  let fills = 0;
  let threads: number | undefined;
  const fill = flags.fill === false ? undefined : flags.fill;
  const watch = flags.fill === false ? null : new RangeWatch(fill ?? null);
  try {
    checkFill(fill, field.dtype);
    const name = flags.name ?? defaultName(input);
    const band = watchedBand(field, grid, input, fill, watch, (n) => (fills += n));
    threads = defaultThreads(flags.threads, field.shape[0] * field.shape[1], flags.tile === undefined || flags.tile === 'auto');
    await writeOutputWith(flags.output, io, async (sink) => {
      const builder = new ArchiveBuilder(sink, {}, { slices: grid.slices > 1 });
      const nd = grid.layout === undefined ? {} : { slices: grid.slices, ndShape: field.ndShape, layout: grid.layout };
      const bar = out.tileProgress(`packing '${printable(name)}'`, field.shape[0] * field.shape[1] * (field.dtype === 'f32' ? 4 : 8));
      try {
        // The guard ran (or --no-fill turned it off) in the band callback above, in the command line's words.
        await builder.addBandsAsync(band, [grid.rows, grid.cols], field.dtype, { bound, tile: flags.tile, fill: fill ?? null, fillGuard: false, name, progressive: flags.progressive === true, threads, onProgress: bar.onProgress, layer: flags.layer, ...nd });
      } finally {
        bar.stop();
      }
      builder.finish();
    });
  } finally {
    field.close();
  }
  await reportArray(input, flags, grid, { fill, fills, threads }, out, start);
}

/** What `pack` of an array prints and returns, from the archive as written (its header and index read back, its payloads counted by role). */
async function reportArray(input: string, flags: PackFlags, grid: ArrayGrid, run: { fill: number | undefined; fills: number; threads: number | undefined }, out: Output, start: number): Promise<void> {
  const { fill, fills, threads } = run;
  const facts = await writtenFacts(flags.output);
  const archive = await openArchive(flags.output);
  // The field itself: the archive's only field, or the one that is not a factor of its layer.
  const { header: h, summary } = archive.field(archive.header.fields.find((f) => f.factorOf === undefined)?.name);
  const layer = layerText(archive.header.fields, flags.layer);
  const ix = { summary };
  const size = archive.size;
  await archive.close();
  const elapsed = performance.now() - start;
  if (fill !== undefined && fills === 0) {
    out.note(`the fill value ${fill} does not occur in '${input}'`);
  }
  // The layout of an N-D array is given (--matrix, --layout slices) or the default, slices; no sample is tried.
  const chosen = grid.layout === undefined ? null : flags.matrix !== undefined || flags.layout === 'slices' ? 'given' : 'default';
  const choices = packChoices(flags.tile, chosen, flags.threads, threads);
  const raw = rawBytes(h);
  const e = errorVsBound(h, ix.summary.max_err, ix.summary.rmse);
  const other = e.what === 'max error' ? `RMSE ${num(ix.summary.rmse)}` : `max error ${num(ix.summary.max_err)}`;
  out.text(
    `packed '${input}' (${(h.nd_shape ?? h.shape).join('x')} ${h.dtype}, field '${h.name}'${h.layout ? `, layout ${h.layout}` : ''}) -> '${flags.output}': ` +
      `${raw} bytes in, ${size} bytes out, ratio ${ratio(raw, size)}; ` +
      `bound ${boundText(h)}: ${e.what} ${num(e.value)} (${e.fraction.toFixed(3)} E), ${other}; ${seconds(elapsed)}\n` +
      packDetails(facts, choices, facts.fields.length > 1) +
      layer,
  );
  out.result({ command: 'pack', input, output: flags.output, choices, seconds: elapsed / 1000, archive: facts });
}

/**
 * The band reader the library packs from: rows of the stacked matrix (slices
 * x rows; each is `grid.cols / field.shape[1]` rows of the file's C-order
 * matrix). The first pass (the value range) reads every row once, in order:
 * fill values are counted there (`onFill`), and `watch` sees the values,
 * refusing after the last row a value that looks like an undeclared fill.
 */
export function watchedBand(field: BandReader, grid: ArrayGrid, input: string, fill: number | undefined, watch: RangeWatch | null, onFill: (n: number) => void): (r0: number, count: number) => FloatArray {
  const rows = grid.slices * grid.rows;
  const factor = grid.cols / field.shape[1];
  let firstPass = true;
  return (r0, count) => {
    let values: FloatArray;
    try {
      values = field.band(r0 * factor, count * factor);
    } catch (e) {
      throw fileError(e, 'read', input);
    }
    if (firstPass && fill !== undefined) onFill(countFill(values, fill));
    if (firstPass) watch?.add(values);
    if (firstPass && r0 + count === rows) {
      firstPass = false;
      const s = watch?.suspect();
      if (s) throw new UsageError(suspectMessage(s, `'${input}'`, field.dtype === 'f32'));
    }
    return values;
  };
}

/** `pack IN.nc`: every chosen variable becomes one field of one archive. */
async function packNetcdf(input: string, flags: PackFlags & { bound: Bound }, out: Output, start: number, hdf5: boolean): Promise<void> {
  const misplaced = (['shape', 'dtype', 'endian', 'name'] as const).filter((k) => flags[k] !== undefined).map((k) => `--${k}`);
  if (misplaced.length > 0) {
    throw new UsageError(`${misplaced.join(', ')} do not apply to NetCDF input: shapes, types and names come from '${input}'`);
  }
  await statInput(input);
  const io = { force: flags.force === true, inputs: [input] };
  await checkOutput(flags.output, io);
  // Only the header is read here; each variable is then read a band of rows at a time (NetCDF-4 / HDF5
  // through h5wasm, by hyperslabs: src/io/hdf5-read.ts), so memory holds about one band whatever its size.
  const nc = await openNetcdfInput(input, hdf5);
  let threads: number | undefined;
  let fields: NcField[];
  let carried: string[];
  try {
    const chosen = netcdfFields(nc, flags.var, flags.matrix, flags.bound, flags.layout ?? 'auto', flags.fill);
    fields = chosen.fields;
    carried = chosen.carried;
    const { archiveAttrs } = chosen;
    if (hdf5) archiveAttrs[KEY.format] = 'netcdf4';
    await writeOutputWith(flags.output, io, async (sink) => {
      const builder = new ArchiveBuilder(sink, archiveAttrs, { slices: fields.some((f) => f.slices > 1) });
      for (const f of fields) {
        const cells = f.slices * f.rows * f.cols;
        const bar = out.tileProgress(`packing '${printable(f.name)}'`, cells * (f.read.dtype === 'f32' ? 4 : 8));
        const fieldThreads = defaultThreads(flags.threads, cells, flags.tile === undefined || flags.tile === 'auto');
        if (threads === undefined || (fieldThreads ?? Infinity) > threads) threads = fieldThreads;
        const band = fieldBands(f);
        const read = (r0: number, count: number): FloatArray => {
          try {
            return band(r0, count);
          } catch (e) {
            throw fileError(e, 'read', input);
          }
        };
        // The bar holds a timer: stopped however the field ends.
        await builder.addBandsAsync(read, [f.rows, f.cols], f.read.dtype, {
          onProgress: bar.onProgress,
          threads: fieldThreads,
          bound: flags.bound,
          tile: flags.tile,
          fill: f.read.fill,
          fillGuard: false, // guarded by netcdfFields, in the command line's words
          name: f.name,
          attrs: f.attrs,
          slices: f.slices,
          ndShape: f.read.shape,
          dims: f.read.dims,
          layout: f.layout,
          progressive: flags.progressive === true,
          layer: flags.layer,
        }).finally(() => bar.stop());
      }
      builder.finish();
    });
  } finally {
    nc.close();
  }
  const facts = await writtenFacts(flags.output);
  const archive = await openArchive(flags.output);
  const size = archive.size;
  let raw = 0;
  const lines: string[] = [];
  for (const [i, h] of archive.header.fields.entries()) {
    // A layer's factor fields are not variables of the input (their bytes count in the archive's size).
    if (h.factorOf !== undefined) continue;
    const ix = archive.field(h.name);
    // Bytes in: the values as the source stores them (a short variable counts 2 bytes a value, not the 8 of its physical float64s).
    const stored = h.attrs[KEY.storedType];
    const r = typeof stored === 'string' && stored in NC_TYPE_SIZE ? (rawBytes(h) / (h.dtype === 'f32' ? 4 : 8)) * NC_TYPE_SIZE[stored as NcType] : rawBytes(h);
    raw += r;
    const e = errorVsBound(h, ix.summary.max_err, ix.summary.rmse);
    const layout = h.layout ?? 'plain';
    const own = facts.fields[i];
    lines.push(`  ${printable(h.name)} (${(h.dims ?? []).map(printable).join(', ')}) ${(h.nd_shape ?? h.shape).join('x')} ${h.dtype}, layout ${layout}: ${bytesText(own.payloadBytes)}, ratio ${ratio(r, own.payloadBytes)}; ${e.what} ${num(e.value)} (${e.fraction.toFixed(3)} E)\n`);
  }
  await archive.close();
  const choices = packChoices(flags.tile, flags.layout === 'slices' || flags.matrix !== undefined ? 'given' : 'auto', flags.threads, threads);
  const elapsed = performance.now() - start;
  out.text(`packed ${fields.length} variable${fields.length === 1 ? '' : 's'} of '${input}' -> '${flags.output}': ${raw} bytes in, ${size} bytes out, ratio ${ratio(raw, size)}; bound ${flags.bound.mode}:${flags.bound.value}; ${seconds(elapsed)}\n`);
  for (const l of lines) out.text(l);
  if (carried.length > 0) out.text(`  carried losslessly (not packed as fields): ${carried.map(printable).join(', ')}\n`);
  out.text(packDetails(facts, choices, facts.fields.length > 1) + layerText(archive.header.fields, flags.layer));
  out.result({ command: 'pack', input, output: flags.output, choices, seconds: elapsed / 1000, archive: facts });
}

/** How an N-D .npy or raw array is laid out as a field: slices x rows x cols, and the layout name (undefined for 2-D). */
export interface ArrayGrid {
  slices: number;
  rows: number;
  cols: number;
  layout: string | undefined;
}

/**
 * The layout of an array of `nd` axes from .npy or raw input: 2-D as it is;
 * more axes as slices over the last two (the default), or with --matrix as a
 * matrix whose rows are the leading axes, named axis0, axis1, ... (case
 * does not matter), since these files carry no dimension names.
 */
export function arrayGrid(nd: readonly number[], matrix: string[] | undefined, layout: 'auto' | 'slices' | undefined, input: string): ArrayGrid {
  const k = nd.length;
  const prod = (a: readonly number[]) => a.reduce((x, y) => x * y, 1);
  if (k === 2) {
    if (matrix || layout === 'slices') throw new UsageError(`--matrix and --layout apply to arrays of 3 or more axes; '${input}' holds a 2-D array`);
    return { slices: 1, rows: nd[0], cols: nd[1], layout: undefined };
  }
  if (matrix) {
    const names = nd.map((_, i) => `axis${i}`);
    const ok = matrix.length < k && matrix.every((m, i) => m.toLowerCase() === names[i]);
    if (!ok) throw new UsageError(`--matrix ${matrix.join(',')}:...: '${input}' has no dimension names; its axes are ${names.join(', ')} (name leading ones, e.g. --matrix axis0:space)`);
    return { slices: 1, rows: prod(nd.slice(0, matrix.length)), cols: prod(nd.slice(matrix.length)), layout: `matrix:${matrix.length}` };
  }
  return { slices: prod(nd.slice(0, -2)), rows: nd[k - 2], cols: nd[k - 1], layout: 'slices' };
}

/** `--layout`: auto or slices. */
function layoutOption(text: string): 'auto' | 'slices' {
  if (text === 'auto' || text === 'slices') return text;
  throw new UsageError(`--layout must be auto or slices (use --matrix AXES:NAME for a matrix), got '${printable(text)}'`);
}


