/** `rankfield preview`: a PNG heatmap of a field's decoded values, its error against the original, or its ranks per tile. */
import { InvalidArgumentError, type Command } from 'commander';
import { hasSlices } from '../archive.js';
import { printable } from '../format/schema.js';
import { type Archive, type Dtype, type FieldHeader, type FloatArray, formatBound, isPointwise } from '../index.js';
import { ndShape } from '../geometry.js';
import { netcdfOriginals } from './check.js';
import { heatmap, type HeatmapSpec } from '../picture/heatmap.js';
import { blockFor, EXACT_CODE, rankGrid, readGrids, slicePlane, snapshotPlane, snapshotShape, type Grid, type Plane, type PictureWindow } from '../picture/sample.js';
import { fileError, UsageError } from './errors.js';
import { checkOutput, isUrl, openArchive, statInput, writeOutput } from './files.js';
import { num, seconds } from './format.js';
import { flatValues, inputKind, openFieldBands } from './input.js';
import type { Context } from './context.js';
import { dtypeOption, endianOption, nameOption } from './options.js';
import { Output, type OutputFlags } from './output.js';
import { regionOption } from './unpack.js';
import type { Region } from './window.js';
import { byPath } from './netcdf.js';

type MapKind = 'value' | 'error' | 'rank';

interface PreviewFlags extends OutputFlags {
  output: string;
  var?: string;
  slice?: number;
  region?: Region;
  map?: MapKind;
  against?: string;
  dtype?: Dtype;
  endian?: 'little' | 'big';
  size?: number;
  force?: boolean;
}

/** Longest side of the picture, in picture cells, by default. */
const DEFAULT_SIZE = 768;

const HELP = `
Maps:
  value   the decoded values (block means where the field is larger than
          the picture), on the field's valid range, in its units
  error   |decoded - original| / E per cell (block maxima), E the archive's
          resolved tolerance: 1 is the bound for abs and rel; for rmse and
          psnr E is the RMSE limit, which single cells may exceed. Needs
          --against ORIGINAL: what the field was packed from (a NetCDF file,
          whose variable of the field's name is read as pack reads it, or a
          .npy of the field's N-D shape), of which the drawn slice or
          snapshot is compared; or that slice or snapshot alone (.npy, or
          raw of its rows x columns)
  rank    the rank of each tile's low-rank part (0: a mean and a coded
          residual only), exactly stored tiles in white; reads the index only

--slice I picks a slice of a field of slices, or for a field stored as a
matrix (layout matrix:A, one snapshot per row) the row, drawn over the
variable's remaining axes (all but the last flattened into rows).

Colours: viridis (value, rank) and inferno (error), perceptually uniform maps
by van der Walt and Smith (2015); missing cells (NaN, infinities, the fill
value) are grey. A field larger than --size cells on its longer side is read
band by band and drawn one picture cell per block of cells.

Example:
  rankfield preview sst.rfz -o sst.png
  rankfield preview sst.rfz -o sst-error.png --map error --against sst.npy`;

function mapOption(text: string): MapKind {
  if (text === 'value' || text === 'error' || text === 'rank') return text;
  throw new InvalidArgumentError(`map must be value, error or rank, got '${printable(text)}'`);
}

function countOption(what: string, min: number, max: number) {
  return (text: string): number => {
    const n = Number(text.trim());
    if (!/^[0-9]+$/.test(text.trim()) || !Number.isSafeInteger(n) || n < min || n > max) throw new InvalidArgumentError(`${what} must be an integer from ${min} to ${max}, got '${printable(text)}'`);
    return n;
  };
}

/**
 * The slices a preview chooses among, and the plane it draws of each: the
 * stored slices, or for a matrix layout the rows of the matrix (snapshots),
 * each over the variable's last two axes.
 */
function planes(archive: Archive, h: FieldHeader): { count: number; what: string; plane: (i: number) => Plane } | null {
  if (snapshotShape(h)) {
    const lead = (h.dims ?? []).slice(0, Number(h.layout!.slice(7))).map(printable).join(', ');
    return { count: h.shape[0], what: `snapshot${lead ? ` (${lead})` : ''}`, plane: (i) => snapshotPlane(archive, h, i) };
  }
  if (hasSlices(h)) return { count: h.slices ?? 1, what: 'slice', plane: (i) => slicePlane(archive, h, i) };
  return null;
}

/** The window a preview draws, checked against the plane. */
function windowOf(h: FieldHeader, flags: PreviewFlags, choice: ReturnType<typeof planes>, plane: Plane): PictureWindow {
  const slice = flags.slice ?? 0;
  if (flags.slice !== undefined && choice === null) throw new UsageError(`field '${printable(h.name)}' is a plain 2-D field: it has no slices to choose`);
  if (choice !== null && slice >= choice.count) throw new UsageError(`field '${printable(h.name)}' has ${choice.what.split(' ')[0]}s 0..${choice.count - 1}, not ${slice}`);
  const r = flags.region;
  const rows: [number, number] = [r?.rows[0] ?? 0, r?.rows[1] ?? plane.rows];
  const cols: [number, number] = [r?.cols[0] ?? 0, r?.cols[1] ?? plane.cols];
  for (const [what, [a, b], n] of [['rows', rows, plane.rows], ['columns', cols, plane.cols]] as const) {
    if (a >= b || b > n) throw new UsageError(`field '${printable(h.name)}' has ${n} ${what}; the region's ${what} ${a}:${b} lie outside it`);
  }
  return { slice, rows, cols };
}

/** The field's unit, from its CF `units` attribute. */
function unitOf(h: FieldHeader): string {
  const u = h.attrs.units;
  return typeof u === 'string' && u.length > 0 && u.length <= 40 ? u : '';
}

/** The picture's specification for one map. */
function specOf(kind: MapKind, h: FieldHeader, grid: Grid, w: PictureWindow, scale: number, file: string, region: boolean, choice: ReturnType<typeof planes>): HeatmapSpec {
  const unit = unitOf(h);
  const long = typeof h.attrs.long_name === 'string' ? `${h.attrs.long_name} ` : '';
  const where = `${choice ? `${choice.what} ${w.slice} of ${choice.count}, ` : ''}rows ${w.rows[0]}..${w.rows[1] - 1}, columns ${w.cols[0]}..${w.cols[1] - 1}`;
  const tol = `E = ${num(h.bound.tolerance)}${unit ? ` ${unit}` : ''}`;
  const bound = `bound ${formatBound(h.bound)} (${isPointwise(h.bound.mode) ? 'pointwise' : 'RMSE'} limit ${tol}); archive '${file}'`;
  const what = kind === 'value' ? 'decoded values' : kind === 'error' ? '|decoded - original| / E' : 'rank of each tile';
  const finite = grid.cells.filter((v) => Number.isFinite(v) && v !== EXACT_CODE);
  const max = finite.reduce((a, b) => Math.max(a, b), -Infinity);
  const min = finite.reduce((a, b) => Math.min(a, b), Infinity);
  const notes = [grid.block > 1 ? `one pixel: ${grid.block} x ${grid.block} cells (${kind === 'value' ? 'mean' : kind === 'error' ? 'largest' : 'the first cell\'s tile'})` : scale > 1 ? `one cell: ${scale} x ${scale} pixels` : 'one cell per pixel'];
  if (kind === 'rank') notes.push(`tiles of ${h.tile[0]} x ${h.tile[1]} cells${snapshotShape(h) ? ' of the matrix (one snapshot per row)' : ''}`);
  if (snapshotShape(h)) {
    const rest = (h.dims ?? []).slice(Number(h.layout!.slice(7))).map(printable);
    const axes = rest.length >= 2 ? `: (${rest.slice(0, -1).join(', ')}) x ${rest[rest.length - 1]}` : '';
    notes.push(`stored as a matrix (layout ${h.layout}), one snapshot per row: drawn is one row laid out over the remaining axes${axes}`);
  }
  const base = { cells: grid.cells, rows: grid.rows, cols: grid.cols, scale, title: [`${long}'${printable(h.name)}': ${what}`, where, bound], notes, missing: grid.missing > 0 };
  if (kind === 'value') {
    const range = !region && h.bound.range ? h.bound.range : finite.length > 0 ? [min, max] : [0, 1];
    return { ...base, map: 'viridis', lo: range[0], hi: range[1], barLabel: unit || 'value' };
  }
  if (kind === 'error') return { ...base, map: 'inferno', lo: 0, hi: Math.max(1, finite.length > 0 ? max : 1), barLabel: '|error| / E' };
  // Tile edges, in picture cells (for slices; tiles of a matrix do not follow the picture's axes).
  const edges = (lo: number, hi: number, t: number) => {
    const out: number[] = [];
    for (let e = (Math.floor(lo / t) + 1) * t; e < hi; e += t) out.push(Math.round((e - lo) / grid.block));
    return out;
  };
  const lines = snapshotShape(h) ? undefined : { rows: edges(w.rows[0], w.rows[1], h.tile[0]), cols: edges(w.cols[0], w.cols[1], h.tile[1]) };
  return { ...base, edges: lines, map: 'viridis', lo: 0, hi: Math.max(1, finite.length > 0 ? max : 1), discrete: true, barLabel: 'rank', specials: grid.cells.includes(EXACT_CODE) ? [{ code: EXACT_CODE, colour: [255, 255, 255], label: 'exact' }] : [], missing: false };
}

/**
 * The original values of the plane drawn, for --map error, read a band of
 * rows at a time: ORIGINAL holds the whole field (NetCDF: the variable of
 * the field's name; .npy or raw: the field's N-D shape), of which the
 * plane's run of C-order values is read (slice i of a field of slices, row
 * i of a field stored as a matrix), or just the plane (.npy or raw of its
 * rows x columns). Only headers are read here; the caller closes it.
 */
async function planeOriginal(archive: Archive, h: FieldHeader, input: string, flags: PreviewFlags, plane: Plane, index: number): Promise<{ rows: (r0: number, count: number) => FloatArray; close(): void }> {
  const path = flags.against!;
  const kind = await inputKind(path);
  const size = plane.rows * plane.cols;
  const whole = ndShape(h);
  if (kind === 'netcdf' || kind === 'hdf5') {
    if (flags.dtype !== undefined || flags.endian !== undefined) throw new UsageError(`--dtype and --endian describe raw originals; '${printable(path)}' is NetCDF`);
    const o = await netcdfOriginals(path, archive, [h.name], input, kind === 'hdf5');
    const read = o.values[h.name];
    return { rows: (r0, count) => read(index * size + r0 * plane.cols, count * plane.cols), close: () => o.close() };
  }
  // A .npy original states its shape; a raw one is read as the plane alone (its rows x columns, the field's dtype unless --dtype).
  const field = await openFieldBands(path, { dtype: flags.dtype, endian: flags.endian }, kind, { shape: [plane.rows, plane.cols], dtype: h.dtype });
  const shape = field.ndShape;
  const same = (a: readonly number[], b: readonly number[]) => a.length === b.length && a.every((d, i) => d === b[i]);
  const at = same(shape, whole) ? index * size : same(shape, [plane.rows, plane.cols]) ? 0 : -1;
  if (at < 0) {
    field.close();
    const what = snapshotShape(h) ? 'snapshot' : hasSlices(h) ? 'slice' : '';
    throw new UsageError(`original '${printable(path)}' is ${shape.join('x')}, but field '${printable(h.name)}' of '${input}' is ${whole.join('x')}${what ? ` (one ${what}: ${plane.rows}x${plane.cols})` : ''}`);
  }
  const rows = (r0: number, count: number): FloatArray => {
    try {
      return flatValues(field, at + r0 * plane.cols, count * plane.cols);
    } catch (e) {
      throw fileError(e, 'read', path);
    }
  };
  return { rows, close: () => field.close() };
}

/** Draw one map of a field of an opened archive; returns the PNG and the figures of the report. */
async function draw(archive: Archive, input: string, flags: Required<Pick<PreviewFlags, 'map' | 'size'>> & PreviewFlags): Promise<{ png: Uint8Array; report: Record<string, unknown> }> {
  const { header: h } = archive.field(byPath(archive.names, flags.var));
  const choice = planes(archive, h);
  const plane = choice ? choice.plane(Math.min(flags.slice ?? 0, choice.count - 1)) : slicePlane(archive, h, 0);
  const w = windowOf(h, flags, choice, plane);
  const block = blockFor(w, flags.size);
  let grid: Grid;
  if (flags.map === 'rank') grid = rankGrid(plane, await archive.fieldIndex(h.name), w, block);
  else {
    const original = flags.map === 'error' ? await planeOriginal(archive, h, input, flags, plane, choice === null ? 0 : Math.min(flags.slice ?? 0, choice.count - 1)) : null;
    try {
      const grids = await readGrids(plane, h, w, block, original?.rows, h.bound.tolerance > 0 ? h.bound.tolerance : 1);
      grid = flags.map === 'error' ? grids.errors! : grids.values;
    } finally {
      original?.close();
    }
  }
  // Small fields are enlarged to about 384 pixels on their longer side.
  const scale = block > 1 ? 1 : Math.max(1, Math.floor(384 / Math.max(grid.rows, grid.cols)));
  const spec = specOf(flags.map, h, grid, w, scale, input, flags.region !== undefined, choice);
  const raster = heatmap(spec);
  return {
    png: raster.png(),
    report: { field: h.name, map: flags.map, colourMap: spec.map, window: w, block, scale, width: raster.width, height: raster.height, scaleRange: [spec.lo, spec.hi], unit: unitOf(h) || null, missingCells: grid.missing },
  };
}

/** Register `preview` on the program. */
export function registerPreview(program: Command, ctx: Context): void {
  program
    .command('preview')
    .summary('draw a field, its error or its ranks per tile as a PNG heatmap')
    .description('Draw one field of an archive as a PNG heatmap with a colour bar: its decoded values, the error against the original per cell, or the rank chosen for each tile.')
    .argument('<IN>', 'archive to draw: a file or an http(s) URL')
    .requiredOption('-o, --output <PNG>', 'picture to write (PNG)')
    .option('--var <NAME>', 'field to draw (default: the first)', nameOption)
    .option('--slice <I>', 'fields of slices: the slice to draw (default 0)', countOption('slice', 0, Number.MAX_SAFE_INTEGER))
    .option('--region <R0:R1,C0:C1>', 'draw only rows R0..R1-1 and columns C0..C1-1 (an empty end means the edge)', regionOption)
    .option('--map <MAP>', 'value (default), error (needs --against) or rank', mapOption)
    .option('--against <ORIGINAL>', 'original values for --map error: the NetCDF or .npy file packed, or the drawn slice alone (.npy or raw)')
    .option('--dtype <TYPE>', 'raw ORIGINAL: f32 or f64 (default: the field\'s)', dtypeOption)
    .option('--endian <ORDER>', 'raw ORIGINAL: byte order, little (default) or big', endianOption)
    .option('--size <N>', `longest side of the picture in cells; larger fields are drawn in blocks (default ${DEFAULT_SIZE})`, countOption('size', 16, 4096))
    .option('--force', 'overwrite PNG if it exists')
    .addHelpText('after', HELP)
    .action(async (input: string, given: PreviewFlags) => {
      const start = performance.now();
      const flags: Required<Pick<PreviewFlags, 'map' | 'size'>> & PreviewFlags = { ...given, map: given.map ?? 'value', size: given.size ?? DEFAULT_SIZE };
      const out = new Output(ctx, flags);
      if (flags.map === 'error' && flags.against === undefined) throw new UsageError('--map error needs --against ORIGINAL (the values the archive was packed from)');
      if (flags.map !== 'error' && (flags.against !== undefined || flags.dtype !== undefined || flags.endian !== undefined)) throw new UsageError('--against, --dtype and --endian apply to --map error');
      if (!/\.png$/i.test(flags.output)) throw new UsageError(`the picture is written as PNG: name it with .png, not '${printable(flags.output)}'`);
      if (!isUrl(input)) await statInput(input);
      if (flags.against !== undefined) await statInput(flags.against);
      const io = { force: flags.force === true, inputs: [input, ...(flags.against ? [flags.against] : [])].filter((p) => !isUrl(p)) };
      await checkOutput(flags.output, io);
      const archive = await openArchive(input);
      let drawn: Awaited<ReturnType<typeof draw>>;
      try {
        drawn = await draw(archive, input, flags);
      } finally {
        await archive.close();
      }
      await writeOutput(flags.output, drawn.png, io);
      const r = drawn.report;
      out.text(`drew the ${flags.map} map of field '${printable(String(r.field))}' of '${input}' -> '${flags.output}' (${r.width} x ${r.height} pixels${Number(r.block) > 1 ? `, one pixel per ${r.block} x ${r.block} cells` : ''}); ${seconds(performance.now() - start)}\n`);
      out.result({ command: 'preview', input, output: flags.output, ...r, bytes: drawn.png.length, seconds: (performance.now() - start) / 1000 });
    });
}
